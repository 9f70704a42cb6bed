package main

import (
	"bytes"
	"flag"
	"os"
	"path/filepath"
	"testing"
)

var updateGolden = flag.Bool("update", false, "rewrite the golden reports in testdata/golden")

// The text and Markdown reports of the demo are compared byte for byte with
// golden files, so that any change to what a user reads shows up as a diff
// in review. The numbers in them are the ones the reference tests check
// against PyTorch (stats/reference_test.go); these files pin the wording,
// layout and formatting. After an intended change, rerun
// `go test ./cmd/vitals -run Golden -update` and review the diff.
func TestGoldenDemoReports(t *testing.T) {
	out := t.TempDir()
	code, text, stderr := runCLI(t, "check", demoBad, "--data", demoData, "--labels", demoLab)
	if code != 1 {
		t.Fatalf("text: exit %d, want 1; stderr %s", code, stderr)
	}
	code, _, stderr = runCLI(t, "check", demoBad, "--data", demoData, "--labels", demoLab, "--format", "markdown", "--out", out)
	if code != 1 {
		t.Fatalf("markdown: exit %d, want 1; stderr %s", code, stderr)
	}
	md, err := os.ReadFile(filepath.Join(out, "report.md"))
	if err != nil {
		t.Fatal(err)
	}
	for _, g := range []struct {
		file string
		have []byte
	}{
		{"demo-check.txt", []byte(text)},
		{"demo-check.md", md},
	} {
		path := filepath.Join("testdata", "golden", g.file)
		if *updateGolden {
			if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(path, g.have, 0o644); err != nil {
				t.Fatal(err)
			}
			continue
		}
		want, err := os.ReadFile(path)
		if err != nil {
			t.Fatalf("%v (create it with `go test ./cmd/vitals -run Golden -update`)", err)
		}
		if !bytes.Equal(g.have, want) {
			t.Errorf("%s differs from the golden file; if the change is intended, rerun `go test ./cmd/vitals -run Golden -update` and review the diff.\n%s",
				path, firstDiff(want, g.have))
		}
	}
}

// firstDiff shows the first line where two texts differ.
func firstDiff(want, have []byte) string {
	wl, hl := bytes.Split(want, []byte("\n")), bytes.Split(have, []byte("\n"))
	for i := 0; i < max(len(wl), len(hl)); i++ {
		var w, h []byte
		if i < len(wl) {
			w = wl[i]
		}
		if i < len(hl) {
			h = hl[i]
		}
		if !bytes.Equal(w, h) {
			return "line " + itoa(i+1) + ":\n  want: " + string(w) + "\n  have: " + string(h)
		}
	}
	return "(lengths differ)"
}
