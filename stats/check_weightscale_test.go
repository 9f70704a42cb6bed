package stats

import (
	"math"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// judged runs judgeWeights with the default thresholds.
func judged(ws ...report.Weight) map[string]weightJudgement {
	p := &Pass{Collected: &Collected{Report: &report.Report{Weights: ws}}, check: weightScaleCheck, Thresholds: DefaultThresholds()}
	return judgeWeights(p)
}

// weight-scale judges std·√fan_in against √2 before a ReLU and 1 otherwise
// (He et al. 2015; Glorot & Bengio 2010), and skips layers a normalisation follows.
func TestWeightScaleReference(t *testing.T) {
	w := func(name, follow string, gain float64) report.Weight {
		return report.Weight{Name: name, Node: name, FanIn: 100, Gain: report.Num(gain), Std: report.Num(gain / 10), FollowedBy: follow, Rows: 4}
	}
	j := judged(w("he_ok", "Relu", 1.41), w("xavier_ok", "Tanh", 1.0), w("relu_small", "Relu", 0.5),
		w("tanh_big", "Tanh", 2.5), w("bn_after", "normalization", 40))
	// 0.5/√2 = 0.35 < 0.5 → off; 2.5/1 > 2 → off; the rest fit or are skipped
	if !j["he_ok"].fits || !j["xavier_ok"].fits || j["relu_small"].fits || j["tanh_big"].fits {
		t.Fatalf("judgements %+v", j)
	}
	if _, ok := j["bn_after"]; ok {
		t.Error("a weight followed by a normalisation was judged")
	}
}

// The fan-out forms are initialisation rules too: a 7×7 stem convolution
// from 3 to 64 channels (fan_in 147, fan_out 3136) initialised with
// Var = 2/fan_out (He et al. 2015, backward case) has gain
// √(2·147/3136) = 0.306 before a ReLU, 0.22× the fan-in rule's √2, and
// fits; before a tanh, Glorot & Bengio 2010's normalised rule
// Var = 2/(fan_in+fan_out) gives √(2·147/3283) = 0.299, so a gain of 0.46
// (1.5× it, 0.46× the fan-in rule, 2.1× the fan-out rule) fits through it
// alone. A gain 4× under every rule does not, and names the nearest.
func TestWeightScaleFanOut(t *testing.T) {
	w := func(name, follow string, gain float64) report.Weight {
		return report.Weight{Name: name, Node: name, FanIn: 147, FanOut: 3136, Gain: report.Num(gain), Std: report.Num(gain / math.Sqrt(147)), FollowedBy: follow, Rows: 64}
	}
	j := judged(w("he_fan_out", "Relu", math.Sqrt(2*147.0/3136)), w("glorot_normalised", "Tanh", 0.46),
		w("too_small", "Relu", math.Sqrt(2*147.0/3136)/4/1.6))
	if !j["he_fan_out"].fits || !j["glorot_normalised"].fits || j["too_small"].fits {
		t.Fatalf("judgements %+v", j)
	}
	if j["too_small"].near.name != "He, fan-out" {
		t.Errorf("nearest rule %q, want He, fan-out", j["too_small"].near.name)
	}
}

// A weight far from every rule is never a finding by itself (issue 15:
// folded BatchNorm, fixed bases, the last classifier layer legitimately
// leave the initialisation scale); it is named as the likely cause inside
// the dead-units finding of the ReLU it feeds when it is too large there
// (4/√2 = 2.8× He's gain, He et al. 2015), and not when it is too small.
func TestWeightScaleNamesCauseOnlyWithConsequence(t *testing.T) {
	mk := func(gain float64, dead float64) *Collected {
		r := &report.Report{Input: report.Input{Samples: 500},
			Layers:  []report.Layer{reluLayer("relu", dead, 64)},
			Weights: []report.Weight{{Name: "fc.weight", Node: "fc", FanIn: 64, FanOut: 64, Gain: report.Num(gain), FollowedBy: "Relu", Rows: 64}}}
		return &Collected{Report: r, LayerKind: []ActKind{ActReLU}, FeedWeight: map[int]int{0: 0}}
	}
	both := []*Check{deadUnitsCheck, weightScaleCheck}
	col := mk(4, 0.6)
	if err := Run(col, both, nil); err != nil {
		t.Fatal(err)
	}
	fs := col.Report.Findings
	if len(fs) != 1 || fs[0].Check != "dead-units" || !strings.Contains(fs[0].Message, `Likely cause: weight "fc.weight"`) || fs[0].Evidence["likely_cause"] == nil {
		t.Fatalf("findings %+v, want one dead-units finding naming fc.weight", fs)
	}
	col = mk(4, 0) // no dead units: the large gain alone is no finding
	if err := Run(col, both, nil); err != nil || len(col.Report.Findings) != 0 {
		t.Fatalf("healthy layer after a large weight: %v %+v", err, col.Report.Findings)
	}
	col = mk(0.3, 0.6) // too small does not explain dead units
	if err := Run(col, both, nil); err != nil || strings.Contains(col.Report.Findings[0].Message, "Likely cause") {
		t.Fatalf("small weight named as the cause: %v %+v", err, col.Report.Findings)
	}
}

// PyTorch's default initialisation of Conv and Linear, U(±1/√fan_in), has
// gain 1/√3 (value from the framework's source, common practice): before a
// ReLU that is 0.41× He's √2, outside the rules, and the cause names the
// default; before a tanh (0.58× of 1) it fits.
func TestWeightScaleFrameworkDefault(t *testing.T) {
	g := 1 / math.Sqrt(3)
	w := func(name, follow string) report.Weight {
		return report.Weight{Name: name, Node: name, FanIn: 64, FanOut: 64, Gain: report.Num(g), Std: report.Num(g / 8), FollowedBy: follow, Rows: 64}
	}
	j := judged(w("relu_default", "Relu"), w("tanh_default", "Tanh"))
	if j["relu_default"].fits || !j["tanh_default"].fits {
		t.Fatalf("judgements %+v", j)
	}
	if !strings.Contains(j["relu_default"].text(), "U(±1/√fan_in)") || math.Abs(j["relu_default"].forward-g/math.Sqrt2) > 1e-9 {
		t.Errorf("%q, forward %.3g: want the framework default named and forward factor %.3g", j["relu_default"].text(), j["relu_default"].forward, g/math.Sqrt2)
	}
}
