package stats

import (
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// spread-collapse compares the last activation of a stack with the first
// (Glorot & Bengio 2010): ratio 0.05 → warning, 1e-4 → error, 0.5 → nothing.
func TestSpreadCollapseGrades(t *testing.T) {
	for _, tc := range []struct {
		last float64
		want report.Severity
	}{{0.5, ""}, {0.05, report.Warning}, {1e-4, report.Error}} {
		r := &report.Report{}
		for i, std := range []float64{1, 0.7, tc.last} {
			r.Layers = append(r.Layers, report.Layer{Node: string(rune('a' + i)), Op: "Tanh", Std: report.Num(std)})
		}
		col := &Collected{Report: r, Stacks: []Stack{{Layers: []int{0, 1, 2}}}, LayerKind: []ActKind{ActSaturating, ActSaturating, ActSaturating}}
		fs := checkOn(t, spreadCollapseCheck, col, nil)
		switch {
		case tc.want == "" && len(fs) != 0:
			t.Errorf("ratio %g: unexpected %v", tc.last, fs)
		case tc.want != "" && (len(fs) != 1 || fs[0].Severity != tc.want || fs[0].Node != "c"):
			t.Errorf("ratio %g: %v, want one %s on the last layer", tc.last, fs, tc.want)
		}
	}
}

// Stacks that share their first layer (a network's branches each end one)
// give one finding per first layer, on the worst of them, naming the others
// that crossed the line; a stack from another first layer has its own.
func TestSpreadOneFindingPerFirstLayer(t *testing.T) {
	r := &report.Report{}
	for i, std := range []float64{1, 0.5, 0.05, 1e-4, 0.02, 2, 1, 0.1} {
		r.Layers = append(r.Layers, report.Layer{Node: string(rune('a' + i)), Op: "Tanh", Std: report.Num(std)})
	}
	kinds := make([]ActKind, len(r.Layers))
	col := &Collected{Report: r, LayerKind: kinds, Stacks: []Stack{
		{Layers: []int{0, 1, 2}}, // a → c: 0.05, warning
		{Layers: []int{0, 1, 3}}, // a → d: 1e-4, error: the worst from a
		{Layers: []int{0, 1, 4}}, // a → e: 0.02
		{Layers: []int{5, 6, 7}}, // f → h: 0.05, its own
	}}
	fs := checkOn(t, spreadCollapseCheck, col, nil)
	if len(fs) != 2 {
		t.Fatalf("%d findings %v, want 2", len(fs), fs)
	}
	byNode := map[string]report.Finding{}
	for _, f := range fs {
		byNode[f.Node] = f
	}
	d, ok := byNode["d"]
	if !ok || d.Severity != report.Error || strings.Join(d.Evidence["also"].([]string), ",") != "c,e" || !strings.Contains(d.Message, "2 other layers") {
		t.Errorf("finding from a: %+v, want an error on d naming c and e", d)
	}
	if h, ok := byNode["h"]; !ok || len(h.Evidence["also"].([]string)) != 0 {
		t.Errorf("finding from f: %+v, want one on h alone", h)
	}
}
