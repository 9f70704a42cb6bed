//go:build linux

package loader

import (
	"bytes"
	"os"
	"path/filepath"
	"strconv"
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

// releaseRead gives back the pages of a mapped file (the model loader does
// so after copying the weights out): reading them again still gives the
// file's bytes, the process's resident memory drops (VmRSS in
// /proc/self/status, Linux), and memory that is not a mapping is left
// alone.
func TestReleaseReadKeepsBytes(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "w.bin")
	want := bytes.Repeat([]byte("weights!"), 4<<20) // 32 MiB
	if err := os.WriteFile(path, want, 0o644); err != nil {
		t.Fatal(err)
	}
	err := withFileBytes(path, func(b []byte) error {
		var sum byte
		for i := 0; i < len(b); i += 4096 { // fault every page in
			sum += b[i]
		}
		mapSink = sum
		before := residentKB(t)
		releaseRead(b[100:]) // whole pages from the second on
		after := residentKB(t)
		if before-after < 24<<10 {
			t.Errorf("resident memory %d KB → %d KB after releasing 32 MiB of mapped pages", before, after)
		}
		if !bytes.Equal(b, want) {
			t.Error("bytes read after releaseRead differ from the file")
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	heap := bytes.Repeat([]byte{7}, 1<<20)
	releaseRead(heap)
	if !bytes.Equal(heap, bytes.Repeat([]byte{7}, 1<<20)) {
		t.Error("releaseRead changed memory that is not a file mapping")
	}
}

// residentKB is VmRSS of /proc/self/status.
func residentKB(t *testing.T) int {
	t.Helper()
	s, err := os.ReadFile("/proc/self/status")
	if err != nil {
		t.Skip("no /proc/self/status")
	}
	for _, line := range strings.Split(string(s), "\n") {
		if f := strings.Fields(line); len(f) >= 2 && f[0] == "VmRSS:" {
			n, err := strconv.Atoi(f[1])
			if err != nil {
				t.Fatal(err)
			}
			return n
		}
	}
	t.Skip("no VmRSS")
	return 0
}
