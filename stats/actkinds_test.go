package stats_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/vitals-health/vitals/internal/actkind"
	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/plots"
	"github.com/vitals-health/vitals/report"
)

// actModel is a dense layer of 6 units followed by an activation written by
// act (which returns the node name of the activation's output). Units 0 and
// 1 get a bias of −1e4, so their pre-activation is never > 0; the others get
// +10 with weights of 0.01, so theirs is always > 0 for |x| of order 1.
// Every activation below is > 0 exactly when its input is, so the dead
// fraction is 2/6 by construction (and Softplus, < 0.01 exactly for the
// first two units, has a saturated fraction of 2/6).
func actModel(opset int64, act func(b *modelbuild.Builder, z string) (node, out string)) (*modelbuild.Builder, string) {
	const in, units = 4, 6
	b := modelbuild.New("act", opset)
	b.Input("x", []int{1, in}, true)
	w := make([]float32, in*units)
	for i := range w {
		w[i] = 0.01
	}
	bias := []float32{-1e4, -1e4, 10, 10, 10, 10}
	b.Init("W", []int{in, units}, w)
	b.Init("B", []int{units}, bias)
	b.Node("MatMul", "fc", []string{"x", "W"}, []string{"h"})
	b.Node("Add", "fc_bias", []string{"h", "B"}, []string{"z"})
	node, out := act(b, "z")
	b.Output(out)
	return b, node
}

func scalar(b *modelbuild.Builder, name string, v float32) string {
	b.Init(name, nil, []float32{v})
	return name
}

// op is an activation written as one operator.
func op(name string) func(b *modelbuild.Builder, z string) (string, string) {
	return func(b *modelbuild.Builder, z string) (string, string) {
		return "act", b.Node(name, "act", []string{z}, []string{"y"})
	}
}

// Every activation kind that models use (ReLU-like smooth units as single
// operators and as the subgraphs PyTorch 1.13 exports, and Softplus) gets
// unit statistics, a dead-units finding at 2/6 ≥ 25% (common practice
// threshold, stats/checklist.go) and both figures; the nodes inside a
// subgraph get none of their own. The activation definitions are the ONNX
// operator specifications; GELU's erf form is x·½·(1+erf(x/√2)) (Hendrycks &
// Gimpel's definition, as PyTorch exports it).
func TestEveryActivationKindIsMeasuredAndDrawn(t *testing.T) {
	for _, tc := range []struct {
		name       string
		opset      int64
		act        func(b *modelbuild.Builder, z string) (string, string)
		activation string   // Layer.Activation of the activation node
		inner      []string // nodes inside the pattern: not layers
	}{
		{"Gelu op", 20, op("Gelu"), "relu-like", nil},
		{"Swish op", 24, op("Swish"), "relu-like", nil},
		{"Mish op", 18, op("Mish"), "relu-like", nil},
		{"Elu op", 13, op("Elu"), "relu-like", nil},
		{"Selu op", 13, op("Selu"), "relu-like", nil},
		{"Celu op", 13, op("Celu"), "relu-like", nil},
		{"HardSwish op", 14, op("HardSwish"), "relu-like", nil},
		{"Softplus op", 13, op("Softplus"), "saturating", nil},
		{"SiLU as x·sigmoid(x)", 13, func(b *modelbuild.Builder, z string) (string, string) {
			s := b.Node("Sigmoid", "sig", []string{z}, []string{"s"})
			return "silu", b.Node("Mul", "silu", []string{s, z}, []string{"y"})
		}, "relu-like", []string{"sig"}},
		{"GELU erf form as PyTorch exports it", 13, func(b *modelbuild.Builder, z string) (string, string) {
			d := b.Node("Div", "g_div", []string{z, scalar(b, "sqrt2", float32(math.Sqrt2))}, []string{"d"})
			e := b.Node("Erf", "g_erf", []string{d}, []string{"e"})
			a := b.Node("Add", "g_add", []string{e, scalar(b, "one", 1)}, []string{"a"})
			m := b.Node("Mul", "g_mul", []string{z, a}, []string{"m"})
			return "g_mul1", b.Node("Mul", "g_mul1", []string{m, scalar(b, "half", 0.5)}, []string{"y"})
		}, "relu-like", []string{"g_div", "g_erf", "g_add", "g_mul"}},
		{"GELU erf form, ½ first and x·(1/√2)", 13, func(b *modelbuild.Builder, z string) (string, string) {
			h := b.Node("Mul", "g_half", []string{scalar(b, "half", 0.5), z}, []string{"h2"})
			d := b.Node("Mul", "g_scale", []string{scalar(b, "rsqrt2", float32(1/math.Sqrt2)), z}, []string{"d"})
			e := b.Node("Erf", "g_erf", []string{d}, []string{"e"})
			a := b.Node("Add", "g_add", []string{scalar(b, "one", 1), e}, []string{"a"})
			return "g_out", b.Node("Mul", "g_out", []string{h, a}, []string{"y"})
		}, "relu-like", []string{"g_half", "g_scale", "g_erf", "g_add"}},
		// Mish = x·tanh(softplus(x)) (Misra 2019), as opsets before 18 carry it
		{"Mish as x·tanh(softplus(x))", 13, func(b *modelbuild.Builder, z string) (string, string) {
			sp := b.Node("Softplus", "m_sp", []string{z}, []string{"sp"})
			th := b.Node("Tanh", "m_tanh", []string{sp}, []string{"th"})
			return "mish", b.Node("Mul", "mish", []string{th, z}, []string{"y"})
		}, "relu-like", []string{"m_sp", "m_tanh"}},
		// the tanh approximation ½x(1 + tanh(√(2/π)(x + 0.044715x³)))
		// (Hendrycks & Gimpel 2016), as PyTorch 1.13 exports
		// gelu(approximate="tanh"): x³ as x·(x·x), constants first
		{"GELU tanh form as PyTorch exports it", 13, func(b *modelbuild.Builder, z string) (string, string) {
			sq := b.Node("Mul", "t_sq", []string{z, z}, []string{"sq"})
			cu := b.Node("Mul", "t_cube", []string{z, sq}, []string{"cu"})
			c := b.Node("Mul", "t_c", []string{scalar(b, "c", 0.044715), cu}, []string{"c3"})
			s := b.Node("Add", "t_sum", []string{z, c}, []string{"s"})
			k := b.Node("Mul", "t_k", []string{scalar(b, "k", float32(math.Sqrt(2/math.Pi))), s}, []string{"kk"})
			th := b.Node("Tanh", "t_tanh", []string{k}, []string{"th"})
			a := b.Node("Add", "t_one", []string{scalar(b, "one", 1), th}, []string{"a"})
			m := b.Node("Mul", "t_x", []string{z, a}, []string{"m"})
			// ½ from a Constant node read first (the first input is no data)
			half := b.Node("Constant", "half_c", nil, []string{"half"}, modelbuild.Attr{Name: "value_float", Value: float32(0.5)})
			return "t_out", b.Node("Mul", "t_out", []string{half, m}, []string{"y"})
		}, "relu-like", []string{"t_sq", "t_cube", "t_c", "t_sum", "t_k", "t_tanh", "t_one", "t_x"}},
		// the same with Pow(x, 3) and ½x first, as GPT-2 code writes it
		{"GELU tanh form with Pow", 13, func(b *modelbuild.Builder, z string) (string, string) {
			h := b.Node("Mul", "t_h", []string{z, scalar(b, "half", 0.5)}, []string{"hx"})
			p := b.Node("Pow", "t_pow", []string{z, scalar(b, "three", 3)}, []string{"p"})
			c := b.Node("Mul", "t_c", []string{p, scalar(b, "c", 0.044715)}, []string{"c3"})
			s := b.Node("Add", "t_sum", []string{c, z}, []string{"s"})
			k := b.Node("Mul", "t_k", []string{s, scalar(b, "k", float32(math.Sqrt(2/math.Pi)))}, []string{"kk"})
			th := b.Node("Tanh", "t_tanh", []string{k}, []string{"th"})
			a := b.Node("Add", "t_one", []string{th, scalar(b, "one", 1)}, []string{"a"})
			return "t_out", b.Node("Mul", "t_out", []string{h, a}, []string{"y"})
		}, "relu-like", []string{"t_h", "t_pow", "t_c", "t_sum", "t_k", "t_tanh", "t_one"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(3, 4))
			b, node := actModel(tc.opset, tc.act)
			r := analyze(t, b, gaussian(rng, 1, 50, 4))
			l := r.LayerByNode(node)
			if l == nil {
				t.Fatalf("no layer %q", node)
			}
			if l.Activation != tc.activation {
				t.Fatalf("%s: Activation %q, want %q", node, l.Activation, tc.activation)
			}
			frac := l.DeadFraction
			if tc.activation == "saturating" {
				frac = l.SaturatedFraction
			}
			if frac == nil || math.Abs(*frac-2.0/6) > 1e-12 {
				t.Errorf("%s: fraction %v, want 2/6", node, report.FmtNum(frac))
			}
			if tc.activation == "relu-like" {
				if fs := findings(r, "dead-units", node); len(fs) != 1 {
					t.Errorf("dead-units findings on %s: %+v, want one", node, fs)
				}
			}
			for _, n := range tc.inner {
				// the values inside the pattern are functions of its input
				// and are not layers of their own (design.md)
				if il := r.LayerByNode(n); il != nil {
					t.Errorf("inner node %s is a layer: %+v", n, il)
				}
			}
			if plots.DepthProfileSpec(r) == nil {
				t.Error("no depth profile")
			}
			if plots.UnitHealthSpec(r) == nil {
				t.Error("no unit-health figure")
			}
		})
	}
}

// Near misses are not read as activations: x·sigmoid(y) with y ≠ x is a
// gate, and x·½·(1+erf(x/2)) and a tanh form with 0.5 for 0.044715 are not
// GELU.
func TestCompositeNearMissesAreNotActivations(t *testing.T) {
	for _, tc := range []struct {
		name string
		act  func(b *modelbuild.Builder, z string) (string, string)
	}{
		{"x·sigmoid(other)", func(b *modelbuild.Builder, z string) (string, string) {
			o := b.Node("Neg", "neg", []string{z}, []string{"o"})
			s := b.Node("Sigmoid", "sig", []string{o}, []string{"s"})
			return "mul", b.Node("Mul", "mul", []string{z, s}, []string{"y"})
		}},
		{"erf(x/2)", func(b *modelbuild.Builder, z string) (string, string) {
			d := b.Node("Div", "g_div", []string{z, scalar(b, "two", 2)}, []string{"d"})
			e := b.Node("Erf", "g_erf", []string{d}, []string{"e"})
			a := b.Node("Add", "g_add", []string{e, scalar(b, "one", 1)}, []string{"a"})
			m := b.Node("Mul", "g_mul", []string{z, a}, []string{"m"})
			return "mul", b.Node("Mul", "mul", []string{m, scalar(b, "half", 0.5)}, []string{"y"})
		}},
		{"tanh(√(2/π)(x + 0.5x³))", func(b *modelbuild.Builder, z string) (string, string) {
			p := b.Node("Pow", "t_pow", []string{z, scalar(b, "three", 3)}, []string{"p"})
			c := b.Node("Mul", "t_c", []string{p, scalar(b, "c", 0.5)}, []string{"c3"})
			s := b.Node("Add", "t_sum", []string{c, z}, []string{"s"})
			k := b.Node("Mul", "t_k", []string{s, scalar(b, "k", float32(math.Sqrt(2/math.Pi)))}, []string{"kk"})
			th := b.Node("Tanh", "t_tanh", []string{k}, []string{"th"})
			a := b.Node("Add", "t_one", []string{th, scalar(b, "one", 1)}, []string{"a"})
			m := b.Node("Mul", "t_x", []string{z, a}, []string{"m"})
			return "mul", b.Node("Mul", "mul", []string{m, scalar(b, "half", 0.5)}, []string{"y"})
		}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(5, 6))
			b, node := actModel(13, tc.act)
			r := analyze(t, b, gaussian(rng, 1, 20, 4))
			if l := r.LayerByNode(node); l == nil || l.Activation != "" || l.DeadFraction != nil {
				t.Errorf("%s read as an activation: %+v", node, l)
			}
		})
	}
}

// The weights before a recognised composite activation are judged against
// the reference gain of that activation (He's √2 for SiLU, as for the
// single Swish operator), not as "no activation".
func TestWeightScaleSeesCompositeActivation(t *testing.T) {
	const in, units = 16, 8
	rng := rand.New(rand.NewPCG(7, 8))
	b := modelbuild.New("silu", 13)
	b.Input("x", []int{1, in}, true)
	w := make([]float32, in*units)
	for i := range w {
		w[i] = float32(rng.NormFloat64() * 0.01) // gain ≈ 0.01·√16 = 0.04, far below √2
	}
	b.Init("W", []int{in, units}, w)
	b.Init("B", []int{units}, make([]float32, units))
	b.Node("MatMul", "fc", []string{"x", "W"}, []string{"h"})
	b.Node("Add", "fc_bias", []string{"h", "B"}, []string{"z"})
	b.Node("Sigmoid", "sig", []string{"z"}, []string{"s"})
	b.Node("Mul", "silu", []string{"z", "s"}, []string{"y"})
	b.Output("y")
	r := analyze(t, b, gaussian(rng, 1, 10, in))
	if !actkind.HeGain("Swish") {
		t.Fatal("Swish should take He's reference gain")
	}
	// weight-scale is evidence, not a finding by itself (it names the cause
	// inside a finding downstream): the weight entry carries the follower
	var fc *report.Weight
	for i := range r.Weights {
		if r.Weights[i].Node == "fc" {
			fc = &r.Weights[i]
		}
	}
	if fc == nil || fc.FollowedBy != "Swish" {
		t.Fatalf("weight of fc %+v, want followed_by=Swish", fc)
	}
	if g := report.Val(fc.Gain); !(g > 0.01 && g < 0.1) {
		t.Errorf("gain %v, want about 0.04", g)
	}
}

// The reference models PyTorch 1.13 exported with SiLU (as Mul(x,
// Sigmoid(x))), GELU (in erf form) and Hardswish get activation layers for
// every such torch module (module_type in the golden files), a depth profile
// and a unit-health figure, where the plots used to have nothing to draw for
// the erf-GELU model.
func TestReferenceModelsWithSmoothUnitsAreDrawn(t *testing.T) {
	want := map[string]string{"dwsep_silu": "SiLU", "vit_tiny": "GELU", "mobile_hardswish": "Hardswish"}
	seen := 0
	for _, r := range allResults(t) {
		module, ok := want[r.model.Name]
		if !ok {
			continue
		}
		seen++
		if r.err != nil {
			t.Fatalf("%s: %v", r.model.Name, r.err)
		}
		for _, g := range r.golden.Layers {
			if g.ModuleType != module {
				continue
			}
			l := vitalsLayer(r.rep, g)
			if l == nil || l.Activation != "relu-like" {
				t.Errorf("%s: %s (%s) is not a relu-like activation layer: %+v", r.model.Name, g.OnnxNode, module, l)
			}
		}
		if plots.DepthProfileSpec(r.rep) == nil || plots.UnitHealthSpec(r.rep) == nil {
			t.Errorf("%s: a figure is missing", r.model.Name)
		}
	}
	if seen != len(want) {
		t.Errorf("found %d of the %d models in testdata/ref/index.json", seen, len(want))
	}
}
