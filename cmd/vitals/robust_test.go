package main

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// demoModel is the over-driven demo checkpoint (demoData, runCLI: cli_test.go).
const demoModel = demoBad

// An unexpected panic anywhere in the pipeline becomes exit code 2 with a
// one-line message; --debug adds the stack.
func TestPanicBecomesExitCode2(t *testing.T) {
	afterBatchHook = func(int) { panic("forced\nfailure") }
	defer func() { afterBatchHook = nil }()
	code, _, stderr := runCLI(t, "check", demoModel, "--data", demoData)
	if code != 2 {
		t.Fatalf("exit code %d, want 2; stderr %q", code, stderr)
	}
	if lines := strings.Split(strings.TrimSpace(stderr), "\n"); len(lines) != 1 || !strings.Contains(lines[0], "internal error: forced failure") || !strings.Contains(lines[0], "--debug") {
		t.Errorf("want one line naming the error, got %q", stderr)
	}
	code, _, stderr = runCLI(t, "check", demoModel, "--data", demoData, "--debug")
	if code != 2 || !strings.Contains(stderr, "goroutine") || !strings.Contains(stderr, "afterBatchHook") && !strings.Contains(stderr, "TestPanicBecomesExitCode2") {
		t.Errorf("--debug: code %d, want the stack; stderr %q", code, stderr)
	}
}

// --out that cannot be created is an error before the run starts.
func TestOutNotWritable(t *testing.T) {
	dir := t.TempDir()
	file := filepath.Join(dir, "somefile")
	os.WriteFile(file, []byte("x"), 0o644)
	afterBatchHook = func(int) { t.Error("the run started") }
	defer func() { afterBatchHook = nil }()
	code, _, stderr := runCLI(t, "check", demoModel, "--data", demoData, "--out", filepath.Join(file, "sub"))
	if code != 2 || !strings.Contains(stderr, "--out") || !strings.Contains(stderr, "somefile") {
		t.Errorf("--out under a file: code %d, stderr %q", code, stderr)
	}
	t.Run("read-only", func(t *testing.T) {
		if os.Geteuid() == 0 {
			t.Skip("running as root: permission bits do not stop root from writing, so a read-only --out cannot be provoked")
		}
		ro := filepath.Join(dir, "ro")
		os.Mkdir(ro, 0o555)
		code, _, stderr := runCLI(t, "check", demoModel, "--data", demoData, "--out", ro)
		if code != 2 || !strings.Contains(stderr, "not writable") {
			t.Errorf("read-only --out: code %d, stderr %q", code, stderr)
		}
	})
}

// --max-memory: a batch over the budget is refused before the run, naming
// the input and the bytes; a bad value is a usage error.
func TestMaxMemoryFlag(t *testing.T) {
	code, _, stderr := runCLI(t, "check", demoModel, "--data", demoData, "--max-memory", "64K", "--batch", "1000")
	// one batch: 1000 samples × 24 float32 = 96000 bytes
	if code != 2 || !strings.Contains(stderr, `input "input"`) || !strings.Contains(stderr, "96000 bytes") || !strings.Contains(stderr, "--batch") {
		t.Errorf("batch over budget: code %d, stderr %q", code, stderr)
	}
	code, _, stderr = runCLI(t, "check", demoModel, "--data", demoData, "--max-memory", "120K", "--batch", "1000")
	// weights (7972 parameters) and the input batch (96000 bytes) fit; the
	// first hidden layer, 1000×64 float32 = 256000 bytes, does not
	if code != 2 || !strings.Contains(stderr, `node "/fc1/Gemm"`) || !strings.Contains(stderr, "256000 bytes") || !strings.Contains(stderr, "memory budget") {
		t.Errorf("activation over budget: code %d, stderr %q", code, stderr)
	}
	code, _, stderr = runCLI(t, "check", demoModel, "--data", demoData, "--max-memory", "8Q")
	if code != 2 || !strings.Contains(stderr, "--max-memory") {
		t.Errorf("bad value: code %d, stderr %q", code, stderr)
	}
	code, _, stderr = runCLI(t, "check", demoModel, "--data", demoData, "--max-memory", "1G", "--format", "json")
	if code > 1 {
		t.Errorf("1G: code %d, stderr %q", code, stderr)
	}
}

// The same model, sample and flags give byte-identical JSON.
func TestDeterministicJSON(t *testing.T) {
	var first string
	for i := range 2 {
		code, out, stderr := runCLI(t, "check", demoModel, "--data", demoData, "--format", "json")
		if code > 1 {
			t.Fatalf("code %d: %s", code, stderr)
		}
		if i == 0 {
			first = out
		} else if out != first {
			t.Errorf("second run differs from the first")
		}
	}
}

type layerJSON struct {
	Node         string   `json:"node"`
	Output       string   `json:"output"`
	Count        int64    `json:"count"`
	Mean         *float64 `json:"mean"`
	Std          *float64 `json:"std"`
	DeadFraction *float64 `json:"dead_fraction"`
	Histogram    *struct {
		Edges  []float64 `json:"edges"`
		Counts []int64   `json:"counts"`
	} `json:"histogram"`
}

// Batch size does not change the statistics: counts, dead fractions and
// histograms exactly, means and stds to 1e-6 relative.
func TestBatchIndependence(t *testing.T) {
	layers := map[int][]layerJSON{}
	for _, b := range []int{20, 50, 100} {
		code, out, stderr := runCLI(t, "check", demoModel, "--data", demoData, "--format", "json", "--batch", itoa(b))
		if code > 1 {
			t.Fatalf("batch %d: code %d: %s", b, code, stderr)
		}
		var r struct {
			Layers []layerJSON `json:"layers"`
		}
		if err := json.Unmarshal([]byte(out), &r); err != nil {
			t.Fatal(err)
		}
		layers[b] = r.Layers
	}
	histOnly := true
	fail := func(hist bool, format string, args ...any) {
		if !hist {
			histOnly = false
		}
		t.Logf(format, args...)
	}
	near := func(a, b *float64) bool {
		if a == nil || b == nil {
			return a == b
		}
		return math.Abs(*a-*b) <= 1e-6*math.Max(math.Abs(*a), math.Abs(*b)) || *a == *b
	}
	failed := false
	ref := layers[20]
	for _, b := range []int{50, 100} {
		got := layers[b]
		if len(got) != len(ref) {
			t.Fatalf("batch %d: %d layers, batch 20: %d", b, len(got), len(ref))
		}
		for i := range ref {
			r, g := ref[i], got[i]
			if r.Count != g.Count || !exactly(r.DeadFraction, g.DeadFraction) {
				fail(false, "batch %d, %s: count %d/%d, dead fraction %v/%v", b, r.Node, g.Count, r.Count, deref(g.DeadFraction), deref(r.DeadFraction))
				failed = true
			}
			if !near(r.Mean, g.Mean) || !near(r.Std, g.Std) {
				fail(false, "batch %d, %s: mean %v/%v std %v/%v", b, r.Node, deref(g.Mean), deref(r.Mean), deref(g.Std), deref(r.Std))
				failed = true
			}
			if (r.Histogram == nil) != (g.Histogram == nil) || r.Histogram != nil && (!equalF(r.Histogram.Edges, g.Histogram.Edges) || !equalI(r.Histogram.Counts, g.Histogram.Counts)) {
				fail(true, "batch %d, %s: histogram differs from batch 20", b, r.Node)
				failed = true
			}
		}
	}
	if failed {
		what := "statistics"
		if histOnly {
			what = "histograms"
		}
		t.Errorf("%s depend on the batch size", what)
	}
}

func exactly(a, b *float64) bool {
	if a == nil || b == nil {
		return a == b
	}
	return *a == *b
}

func itoa(i int) string { b, _ := json.Marshal(i); return string(b) }

func deref(p *float64) any {
	if p == nil {
		return nil
	}
	return *p
}

func equalF(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func equalI(a, b []int64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// SIGINT during a long run: exit 130 within about two seconds, and a report
// already in --out is left exactly as it was (no temporary files either).
func TestInterruptKeepsEarlierReport(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary")
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "vitals")
	build := exec.Command("go", "build", "-o", bin, ".")
	if out, err := build.CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	out := filepath.Join(dir, "out")
	os.Mkdir(out, 0o755)
	earlier := []byte(`{"tool": "vitals", "earlier": true}` + "\n")
	report := filepath.Join(out, "report.json")
	if err := os.WriteFile(report, earlier, 0o644); err != nil {
		t.Fatal(err)
	}
	// synthetic input, ten million samples: hours of work
	cmd := exec.Command(bin, "check", demoModel, "--samples", "10000000", "--out", out, "--format", "json")
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- cmd.Wait() }()
	select {
	case err := <-done:
		t.Fatalf("exited before the signal: %v; %s", err, stderr.String())
	case <-time.After(time.Second):
	}
	if err := cmd.Process.Signal(syscall.SIGINT); err != nil {
		t.Fatal(err)
	}
	select {
	case <-done:
	case <-time.After(2 * time.Second):
		cmd.Process.Kill()
		<-done
		t.Fatalf("still running 2 s after SIGINT; %s", stderr.String())
	}
	if code := cmd.ProcessState.ExitCode(); code != 130 {
		t.Errorf("exit code %d, want 130; stderr %q", code, stderr.String())
	}
	if !strings.Contains(stderr.String(), "interrupted") {
		t.Errorf("stderr %q does not say it was interrupted", stderr.String())
	}
	got, err := os.ReadFile(report)
	if err != nil || !bytes.Equal(got, earlier) {
		t.Errorf("report.json changed: %q, %v", got, err)
	}
	entries, _ := os.ReadDir(out)
	for _, e := range entries {
		if e.Name() != "report.json" {
			t.Errorf("left behind in --out: %s", e.Name())
		}
	}
}

// A finished run with --out replaces the reports whole and leaves no
// temporary files behind (every file goes through a temp file and a rename).
func TestOutWritesWholeFiles(t *testing.T) {
	out := t.TempDir()
	os.WriteFile(filepath.Join(out, "report.json"), []byte("old"), 0o644)
	code, _, stderr := runCLI(t, "check", demoModel, "--data", demoData, "--out", out, "--format", "markdown")
	if code > 1 {
		t.Fatalf("code %d: %s", code, stderr)
	}
	entries, _ := os.ReadDir(out)
	names := map[string]bool{}
	for _, e := range entries {
		names[e.Name()] = true
		if strings.HasPrefix(e.Name(), ".") || strings.Contains(e.Name(), "tmp") {
			t.Errorf("left behind: %s", e.Name())
		}
	}
	for _, want := range []string{"report.json", "report.md", "depth-profile.png"} {
		if !names[want] {
			t.Errorf("%s not written (have %v)", want, names)
		}
	}
	var r map[string]any
	if b, _ := os.ReadFile(filepath.Join(out, "report.json")); json.Unmarshal(b, &r) != nil || r["tool"] != "vitals" {
		t.Errorf("report.json is not the new report")
	}
}
