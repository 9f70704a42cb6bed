package plots

import (
	"bytes"
	"math"
	"testing"

	"github.com/vitals-health/vitals/report"
)

func fp(v float64) *float64 { return &v }

// gradReport: three ReLU layers whose gradient RMS falls by a decade per
// layer towards the input, and two weights with update ratios 1e-6 and 1e-3.
func gradReport() *report.Report {
	lr := 0.1
	return &report.Report{
		Gradients:  &report.Gradients{Loss: "cross-entropy", LR: &lr},
		Thresholds: map[string]float64{"update-ratio.low": 1e-5, "update-ratio.high": 1e-1},
		Layers: []report.Layer{
			{Node: "a", Op: "Relu", Depth: 2, Std: fp(0.5), GradRMS: fp(1e-5)},
			{Node: "fc", Op: "Gemm", Depth: 3, Std: fp(3), GradRMS: fp(7)},
			{Node: "b", Op: "Relu", Depth: 4, Std: fp(1), GradRMS: fp(1e-4)},
			{Node: "c", Op: "Relu", Depth: 6, Std: fp(2), GradRMS: fp(1e-3)},
		},
		Weights: []report.Weight{{Name: "w1", Node: "fc1", UpdateRatio: fp(1e-6)}, {Name: "w2", Node: "fc2", UpdateRatio: fp(1e-3)}},
	}
}

// The gradient-depth figure shows activation layers only, each curve
// divided by its deepest layer's value (known answers 0.01, 0.1, 1 and
// 0.25, 0.5, 1); the update-ratio figure the ratios with the rule-of-thumb
// line at 1e-3 and the check's thresholds; neither exists without a
// backward pass (nor update-ratio without a learning rate). Both render.
func TestGradientSpecs(t *testing.T) {
	r := gradReport()
	c := GradientDepthSpec(r)
	if c == nil || len(c.Lines) != 2 || !c.LogY {
		t.Fatalf("gradient depth spec %+v", c)
	}
	want := [][]float64{{0.01, 0.1, 1}, {0.25, 0.5, 1}}
	for k, s := range c.Lines {
		if len(s.Points) != 3 {
			t.Fatalf("series %q has %d points", s.Name, len(s.Points))
		}
		for i, p := range s.Points {
			if p.X != float64(i) || math.Abs(p.Y-want[k][i]) > 1e-12 {
				t.Errorf("series %q point %d = %+v, want y %g", s.Name, i, p, want[k][i])
			}
		}
	}
	u := UpdateRatioSpec(r)
	if u == nil || len(u.Markers) != 1 || len(u.Markers[0].Points) != 2 || u.Markers[0].Points[0].Y != 1e-6 {
		t.Fatalf("update ratio spec %+v", u)
	}
	lines := map[float64]bool{}
	for _, h := range u.HLines {
		lines[h.Y] = true
	}
	if !lines[1e-3] || !lines[1e-5] || !lines[1e-1] || u.YMin > 1e-6 || u.YMax < 1e-1 {
		t.Errorf("update ratio lines %v, range %g..%g", u.HLines, u.YMin, u.YMax)
	}
	for _, ch := range []*Chart{c, u} {
		var b bytes.Buffer
		if err := RenderChart(&b, ch); err != nil || b.Len() < 1000 {
			t.Errorf("%s: render: %v (%d bytes)", ch.File, err, b.Len())
		}
	}
	r.Gradients.LR = nil
	if UpdateRatioSpec(r) != nil {
		t.Error("update-ratio figure without a learning rate")
	}
	r.Gradients = nil
	if GradientDepthSpec(r) != nil {
		t.Error("gradient figure without a backward pass")
	}
}
