package main

import (
	"bytes"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/internal/modeltest"
)

const demoLabels = "../../testdata/demo/conditions.npy"

// sameJSON compares two decoded JSON reports: strings, bools and integers
// exactly (counts, histogram counts, unit flags, findings), other numbers
// to 1e-12 relative (sums taken in another order); it names the first difference.
func sameJSON(a, b any) error {
	_, err := modeltest.SameJSON(a, b, 1e-12)
	return err
}

// Shards as separate processes: `check --shard k/N --partial` for N = 1, 3
// and 7 over the demo sample (2000 samples in 32 batches of 64: N = 3 and
// 7 do not divide it), merged at once and in stages (pairs merged into
// --partial files, then those), give the single run's JSON report; the
// reference for the single run's numbers is PyTorch (testdata/demo/expected.json,
// held by golden_test.go). Mismatched partials exit 2 naming the files.
func TestShardProcessesMergeToSingleRun(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary")
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "vitals")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	model := "../../testdata/demo/spindle-overdriven.onnx"
	common := []string{model, "--data", demoData, "--labels", demoLabels, "--batch", "64"}
	run := func(want int, args ...string) []byte {
		t.Helper()
		cmd := exec.Command(bin, args...)
		var stdout, stderr bytes.Buffer
		cmd.Stdout, cmd.Stderr = &stdout, &stderr
		err := cmd.Run()
		code := 0
		if ee, ok := err.(*exec.ExitError); ok {
			code = ee.ExitCode()
		} else if err != nil {
			t.Fatal(err)
		}
		if code != want {
			t.Fatalf("vitals %s: exit %d, want %d\n%s", strings.Join(args, " "), code, want, stderr.String())
		}
		return append(stdout.Bytes(), stderr.Bytes()...)
	}
	// the demo's overdriven model has dead-unit errors: exit 1; no backward
	// pass (on by default with --labels), which shards do not run
	single := modeltest.DecodeJSON(t, run(1, append([]string{"check"}, append(common, "--format", "json", "--gradients=false")...)...))
	for _, n := range []int{1, 3, 7} {
		var parts []string
		for k := 0; k < n; k++ {
			p := filepath.Join(dir, fmt.Sprintf("n%d-%d.part", n, k))
			run(0, append([]string{"check"}, append(common, "--shard", fmt.Sprintf("%d/%d", k, n), "--partial", p)...)...)
			parts = append(parts, p)
		}
		// all at once, last first
		rev := []string{"merge", "--format", "json"}
		for k := n - 1; k >= 0; k-- {
			rev = append(rev, parts[k])
		}
		out := run(1, rev...)
		if i := bytes.IndexByte(out, '\n'); i < 0 {
			t.Fatal("no report")
		}
		stdoutJSON := out[:bytes.LastIndexByte(out, '}')+1]
		if err := sameJSON(single, modeltest.DecodeJSON(t, stdoutJSON)); err != nil {
			t.Errorf("N=%d, merged at once: %v", n, err)
		}
		// in stages: neighbours in pairs, then the pairs
		var stage []string
		for k := 0; k < n; k += 2 {
			if k+1 == n {
				stage = append(stage, parts[k])
				continue
			}
			p := filepath.Join(dir, fmt.Sprintf("n%d-%d+%d.part", n, k, k+1))
			run(0, "merge", "--partial", p, parts[k+1], parts[k])
			stage = append(stage, p)
		}
		out = run(1, append([]string{"merge", "--format", "json"}, stage...)...)
		if err := sameJSON(single, modeltest.DecodeJSON(t, out[:bytes.LastIndexByte(out, '}')+1])); err != nil {
			t.Errorf("N=%d, merged in stages: %v", n, err)
		}
	}
	// a partial of the other demo model, and a gap
	other := filepath.Join(dir, "healthy.part")
	run(0, "check", "../../testdata/demo/spindle-healthy.onnx", "--data", demoData, "--labels", demoLabels, "--batch", "64", "--shard", "1/3", "--partial", other)
	p0 := filepath.Join(dir, "n3-0.part")
	if msg := string(run(2, "merge", p0, other)); !strings.Contains(msg, p0) || !strings.Contains(msg, other) || !strings.Contains(msg, "model differ") {
		t.Errorf("different models: %s", msg)
	}
	p2 := filepath.Join(dir, "n3-2.part")
	if msg := string(run(2, "merge", p0, p2)); !strings.Contains(msg, "samples 640–1343 of 2000 are in none of") {
		t.Errorf("gap: %s", msg)
	}
	if msg := string(run(1, "merge", "--allow-gaps", p0, p2)); !strings.Contains(msg, "merged with samples missing (--allow-gaps): 1296 of 2000 samples") {
		t.Errorf("--allow-gaps: %s", msg)
	}
	if msg := string(run(2, "merge", p0, p0)); !strings.Contains(msg, "overlaps") {
		t.Errorf("overlap: %s", msg)
	}
	// compare of two merged states: the healthy model's 3 shards against the
	// overdriven model's 7, each merged first
	var hp []string
	for k := 0; k < 3; k++ {
		p := filepath.Join(dir, fmt.Sprintf("h%d.part", k))
		run(0, "check", "../../testdata/demo/spindle-healthy.onnx", "--data", demoData, "--labels", demoLabels, "--batch", "64", "--shard", fmt.Sprintf("%d/3", k), "--partial", p)
		hp = append(hp, p)
	}
	oldState, newState := filepath.Join(dir, "old.part"), filepath.Join(dir, "new.part")
	run(0, append([]string{"merge", "--partial", oldState}, hp...)...)
	var n7 []string
	for k := 0; k < 7; k++ {
		n7 = append(n7, filepath.Join(dir, fmt.Sprintf("n7-%d.part", k)))
	}
	run(0, append([]string{"merge", "--partial", newState}, n7...)...)
	cmp := modeltest.DecodeJSON(t, run(1, "compare", oldState, newState, "--format", "json")).(map[string]any)
	layers := cmp["compare"].(map[string]any)["layers"].([]any)
	if len(layers) != 7 || cmp["compare"].(map[string]any)["agreement"] != nil {
		t.Errorf("compare of states: %d matched layers (want 7), agreement %v (want none)", len(layers), cmp["compare"].(map[string]any)["agreement"])
	}
	bad := filepath.Join(dir, "bad.part")
	os.WriteFile(bad, []byte("not a partial"), 0o644)
	if msg := string(run(2, "merge", bad)); !strings.Contains(msg, bad) {
		t.Errorf("not a partial: %s", msg)
	}
	if msg := string(run(2, append([]string{"check"}, model, "--data", demoData, "--shard", "0/2", "--partial", bad)...)); !strings.Contains(msg, "--batch") {
		t.Errorf("no --batch: %s", msg)
	}
}
