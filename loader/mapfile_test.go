//go:build linux

package loader

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// withFileBytes hands over the file's exact bytes, and a file truncated
// while mapped gives an error naming the cause instead of a crash.
func TestWithFileBytes(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "m.onnx")
	want := bytes.Repeat([]byte("vitals!"), 100000)
	if err := os.WriteFile(path, want, 0o644); err != nil {
		t.Fatal(err)
	}
	err := withFileBytes(path, func(b []byte) error {
		if !bytes.Equal(b, want) {
			t.Error("mapped bytes differ from the file")
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	err = withFileBytes(path, func(b []byte) error {
		if err := os.Truncate(path, 0); err != nil {
			t.Fatal(err)
		}
		mapSink = b[len(b)-1] // past the new end: SIGBUS
		return nil
	})
	if err == nil || !strings.Contains(err.Error(), "changed while it was read") {
		t.Fatalf("truncated while mapped: %v", err)
	}
	// an empty file is read, not mapped
	if err := os.WriteFile(path, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := withFileBytes(path, func(b []byte) error {
		if len(b) != 0 {
			t.Errorf("empty file gave %d bytes", len(b))
		}
		return nil
	}); err != nil {
		t.Fatal(err)
	}
}

var mapSink byte
