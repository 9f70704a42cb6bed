package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestGradientsEveryFormat: `vitals check --labels` on the demo runs the
// backward pass and every format carries it: JSON fields on every weight
// and activation layer, and a gradient section in text, Markdown and HTML.
// --gradients=false turns it off (fields null); --loss mse without
// --targets is a usage error (exit 2) naming the flag.
func TestGradientsEveryFormat(t *testing.T) {
	code, out, stderr := runCLI(t, "check", demoBad, "--data", demoData, "--labels", demoLab, "--lr", "0.01", "--format", "json")
	if code != 1 {
		t.Fatalf("exit %d; stderr %s", code, stderr)
	}
	var r struct {
		Layers []struct {
			Node    string
			GradRMS *float64 `json:"grad_rms"`
		}
		Weights []struct {
			Name         string
			GradNorm     *float64 `json:"grad_norm"`
			Norm         *float64 `json:"norm"`
			GradToWeight *float64 `json:"grad_to_weight"`
			UpdateRatio  *float64 `json:"update_ratio"`
		}
		Gradients *struct {
			Loss, Target string
			Samples      int
		}
	}
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatal(err)
	}
	if r.Gradients == nil || r.Gradients.Loss != "cross-entropy" || r.Gradients.Target != "labels" || r.Gradients.Samples != 2000 {
		t.Fatalf("gradients %+v", r.Gradients)
	}
	for _, l := range r.Layers {
		if l.GradRMS == nil || *l.GradRMS <= 0 {
			t.Errorf("layer %s: grad_rms %v", l.Node, l.GradRMS)
		}
	}
	for _, w := range r.Weights {
		if w.GradNorm == nil || w.Norm == nil || w.GradToWeight == nil || w.UpdateRatio == nil {
			t.Errorf("weight %s: %+v", w.Name, w)
		}
	}
	_, text, _ := runCLI(t, "check", demoBad, "--data", demoData, "--labels", demoLab)
	if !strings.Contains(text, "Gradients (backward pass):") || !strings.Contains(text, "fc1.weight") {
		t.Errorf("text report has no gradient section")
	}
	for _, f := range []string{"markdown", "html"} {
		dir := t.TempDir()
		if code, _, stderr := runCLI(t, "check", demoBad, "--data", demoData, "--labels", demoLab, "--format", f, "--out", dir); code != 1 {
			t.Fatalf("%s: exit %d: %s", f, code, stderr)
		}
		name := map[string]string{"markdown": "report.md", "html": "report.html"}[f]
		b, err := os.ReadFile(filepath.Join(dir, name))
		if err != nil {
			t.Fatal(err)
		}
		if !strings.Contains(string(b), "Gradients (backward pass)") || !strings.Contains(string(b), "grad RMS") {
			t.Errorf("%s report has no gradient section", f)
		}
	}
	_, off, _ := runCLI(t, "check", demoBad, "--data", demoData, "--labels", demoLab, "--gradients=false", "--format", "json")
	if strings.Contains(off, `"gradients"`) || !strings.Contains(off, `"grad_rms": null`) {
		t.Errorf("--gradients=false still ran the backward pass")
	}
	code, _, stderr = runCLI(t, "check", demoBad, "--data", demoData, "--loss", "mse")
	if code != 2 || !strings.Contains(stderr, "--targets") {
		t.Errorf("--loss mse without targets: exit %d, %q", code, stderr)
	}
}
