package stats

import (
	"math"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

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
