package stats

import (
	"math"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// checkOn runs one check over hand-made statistics with the given threshold
// overrides and returns its findings (a checktest-style helper: the
// expectations sit next to the fixture).
func checkOn(t *testing.T, c *Check, col *Collected, overrides map[string]float64) []report.Finding {
	t.Helper()
	if err := Run(col, []*Check{c}, overrides); err != nil {
		t.Fatal(err)
	}
	return col.Report.Findings
}

func reluLayer(node string, dead float64, units int) report.Layer {
	return report.Layer{Node: node, Op: "Relu", Count: 1000, Units: report.IntPtr(units), UnitAxis: report.IntPtr(1),
		DeadFraction: report.Num(dead), Activation: "relu", Mean: report.Num(0.5), Std: report.Num(1)}
}

// dead-units grades against its thresholds (defaults 25% / 50%, "common
// practice" in docs/design.md) and follows --config overrides.
func TestDeadUnitsThresholds(t *testing.T) {
	mk := func() *Collected {
		r := &report.Report{Input: report.Input{Samples: 500}, Layers: []report.Layer{
			reluLayer("below", 0.24, 100), reluLayer("warn", 0.25, 100), reluLayer("err", 0.5, 100)}}
		return &Collected{Report: r, LayerKind: []ActKind{ActReLU, ActReLU, ActReLU}}
	}
	got := map[string]report.Severity{}
	for _, f := range checkOn(t, deadUnitsCheck, mk(), nil) {
		got[f.Node] = f.Severity
	}
	if len(got) != 2 || got["warn"] != report.Warning || got["err"] != report.Error {
		t.Fatalf("defaults: %v", got)
	}
	fs := checkOn(t, deadUnitsCheck, mk(), map[string]float64{"dead-units.warning": 0.6, "dead-units.error": 0.9})
	if len(fs) != 0 {
		t.Fatalf("raised thresholds still report %v", fs)
	}
	// few samples: never more than a warning, and the message says why
	col := mk()
	col.Report.Input.Samples = 5
	for _, f := range checkOn(t, deadUnitsCheck, col, nil) {
		if f.Severity != report.Warning || !strings.Contains(f.Message, "Only 5 samples") {
			t.Fatalf("5 samples: %v %q", f.Severity, f.Message)
		}
	}
}

// Unknown threshold names are refused, naming the known ones.
func TestUnknownThreshold(t *testing.T) {
	col := &Collected{Report: &report.Report{}}
	err := Run(col, Checks, map[string]float64{"dead-unit.warning": 0.3})
	if err == nil || !strings.Contains(err.Error(), `"dead-unit.warning"`) || !strings.Contains(err.Error(), "dead-units.warning") {
		t.Fatalf("got %v", err)
	}
}

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

// weight-scale judges std·√fan_in against √2 before a ReLU and 1 otherwise
// (He et al. 2015; Glorot & Bengio 2010), and skips layers a normalisation follows.
func TestWeightScaleReference(t *testing.T) {
	w := func(name, follow string, gain float64) report.Weight {
		return report.Weight{Name: name, Node: name, FanIn: 100, Gain: report.Num(gain), Std: report.Num(gain / 10), FollowedBy: follow, Rows: 4}
	}
	r := &report.Report{Weights: []report.Weight{
		w("he_ok", "Relu", 1.41), w("xavier_ok", "Tanh", 1.0), w("relu_small", "Relu", 0.5),
		w("tanh_big", "Tanh", 2.5), w("bn_after", "normalization", 40)}}
	fs := checkOn(t, weightScaleCheck, &Collected{Report: r}, nil)
	got := map[string]bool{}
	for _, f := range fs {
		got[f.Node] = true
	}
	// 0.5/√2 = 0.35 < 0.5 → warning; 2.5/1 > 2 → warning; the rest pass or are skipped
	if len(got) != 2 || !got["relu_small"] || !got["tanh_big"] {
		t.Fatalf("weight-scale findings on %v", got)
	}
}

// The fan-out forms are initialisation rules too: a 7×7 stem convolution
// from 3 to 64 channels (fan_in 147, fan_out 3136) initialised with
// Var = 2/fan_out (He et al. 2015, backward case) has gain
// √(2·147/3136) = 0.306 before a ReLU, 0.22× the fan-in rule's √2, and
// is no finding; before a tanh, Glorot & Bengio 2010's normalised rule
// Var = 2/(fan_in+fan_out) gives √(2·147/3283) = 0.299, so a gain of 0.46
// (1.5× it, 0.46× the fan-in rule, 2.1× the fan-out rule) passes through it
// alone. A gain 4× under every rule is still a warning naming the nearest.
func TestWeightScaleFanOut(t *testing.T) {
	w := func(name, follow string, gain float64) report.Weight {
		return report.Weight{Name: name, Node: name, FanIn: 147, FanOut: 3136, Gain: report.Num(gain), Std: report.Num(gain / math.Sqrt(147)), FollowedBy: follow, Rows: 64}
	}
	r := &report.Report{Weights: []report.Weight{
		w("he_fan_out", "Relu", math.Sqrt(2*147.0/3136)), w("glorot_normalised", "Tanh", 0.46),
		w("too_small", "Relu", math.Sqrt(2*147.0/3136)/4/1.6)}}
	fs := checkOn(t, weightScaleCheck, &Collected{Report: r}, nil)
	if len(fs) != 1 || fs[0].Node != "too_small" {
		t.Fatalf("findings %v, want one on too_small", fs)
	}
	if rule, _ := fs[0].Evidence["rule"].(string); rule != "He, fan-out" {
		t.Errorf("nearest rule %q, want He, fan-out", rule)
	}
}

// PyTorch's default initialisation of Conv and Linear, U(±1/√fan_in), has
// gain 1/√3 (value from the framework's source, common practice): before a
// ReLU that is 0.41× He's √2, a finding that names the default and the
// forward factor 0.41 per layer (He et al. 2015, eq. 10); before a tanh
// (0.58× of 1) it is no finding.
func TestWeightScaleFrameworkDefault(t *testing.T) {
	g := 1 / math.Sqrt(3)
	w := func(name, follow string) report.Weight {
		return report.Weight{Name: name, Node: name, FanIn: 64, FanOut: 64, Gain: report.Num(g), Std: report.Num(g / 8), FollowedBy: follow, Rows: 64}
	}
	fs := checkOn(t, weightScaleCheck, &Collected{Report: &report.Report{Weights: []report.Weight{w("relu_default", "Relu"), w("tanh_default", "Tanh")}}}, nil)
	if len(fs) != 1 || fs[0].Node != "relu_default" {
		t.Fatalf("findings %v, want one on relu_default", fs)
	}
	f := fs[0]
	if f.Evidence["framework_default"] != true || !strings.Contains(f.Message, "U(±1/√fan_in)") || math.Abs(f.Evidence["forward_factor"].(float64)-g/math.Sqrt2) > 1e-9 {
		t.Errorf("finding %+v: want the framework default named and forward factor %.3g", f, g/math.Sqrt2)
	}
}
