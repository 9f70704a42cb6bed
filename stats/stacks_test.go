package stats

import (
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/tensor"
)

// A squeeze-and-excitation gate (GlobalAveragePool → Conv → Sigmoid, then
// Mul(gate, x), the order PyTorch exports `scale * input` in) is a side
// branch: the chain of activations follows the gated signal x, the input
// with more values, so the stack is relu_a → relu_b → relu_c, marked Merged
// (two data paths meet at the Mul), and the gate's Sigmoid, which only
// scales the larger x, is in no stack at all.
func TestStackFollowsSignalPastGate(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	b := modelbuild.New("se", 13)
	b.Input("x", []int{1, 4, 6, 6}, true)
	conv := func(name, in string, co, ci int) string {
		w := make([]float32, co*ci)
		for i := range w {
			w[i] = float32(rng.NormFloat64() * 0.7)
		}
		b.Init("W"+name, []int{co, ci, 1, 1}, w)
		return b.Node("Conv", name, []string{in, "W" + name}, []string{"o" + name})
	}
	a := b.Node("Relu", "relu_a", []string{conv("c1", "x", 4, 4)}, []string{"a"})
	p := b.Node("GlobalAveragePool", "pool", []string{a}, []string{"p"})
	g := b.Node("Sigmoid", "gate", []string{conv("se", p, 4, 4)}, []string{"g"})
	m := b.Node("Mul", "scale", []string{g, a}, []string{"m"})
	r := b.Node("Relu", "relu_b", []string{conv("c2", m, 4, 4)}, []string{"r"})
	y := b.Node("Relu", "relu_c", []string{conv("c3", r, 4, 4)}, []string{"y"})
	b.Output(y)
	mod, plan := BuildPlan(t, b)
	c := NewCollector(mod, plan)
	x := tensor.New(tensor.Float32, []int{8, 4, 6, 6})
	for i := range x.F32() {
		x.F32()[i] = float32(rng.NormFloat64())
	}
	in := map[string]*tensor.Tensor{"x": x}
	c.AddInputs(in)
	if _, err := plan.Run(in, c.Hook); err != nil {
		t.Fatal(err)
	}
	col := c.Finish("file")
	var got []string
	for _, st := range col.Stacks {
		var names []string
		for _, l := range st.Layers {
			names = append(names, col.Report.Layers[l].Node)
		}
		got = append(got, strings.Join(names, "→"))
		if names[len(names)-1] == "relu_c" {
			if strings.Join(names, "→") != "relu_a→relu_b→relu_c" || !st.Merged || len(st.Weights) != 3 {
				t.Errorf("stack %s (merged %v, %d weights), want relu_a→relu_b→relu_c, merged, weights c1, c2 and c3", strings.Join(names, "→"), st.Merged, len(st.Weights))
			}
		}
	}
	if !strings.Contains(strings.Join(got, " "), "relu_a→relu_b→relu_c") {
		t.Errorf("stacks %v: none runs relu_a→relu_b→relu_c", got)
	}
	if strings.Contains(strings.Join(got, " "), "gate") {
		t.Errorf("stacks %v: the gate's Sigmoid is in one", got)
	}
}

// SiLU written out, x·σ(x), is one path: a chain of MatMul → Sigmoid → Mul
// layers is a plain stack (not Merged), so spread-collapse judges it (the
// Sigmoids are self-gates, in no stack; the chain runs through the Muls'
// predecessors). Its spread shrinks with weights N(0, 0.05²) over 400
// units (gain 1, well under the rules for a ReLU-like unit) and the plain
// stack gets a spread-collapse finding; the same chain as a merged stack
// would get none.
func TestSiLUChainIsPlain(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	const units = 100
	b := modelbuild.New("silu", 13)
	b.Input("x", []int{1, units}, true)
	in := "x"
	for l := 0; l < 6; l++ {
		s := string(rune('a' + l))
		w := make([]float32, units*units)
		for i := range w {
			w[i] = float32(rng.NormFloat64() * 0.3 / 10)
		}
		b.Init("W"+s, []int{units, units}, w)
		h := b.Node("MatMul", "fc"+s, []string{in, "W" + s}, []string{"h" + s})
		g := b.Node("Sigmoid", "sig"+s, []string{h}, []string{"g" + s})
		in = b.Node("Mul", "silu"+s, []string{h, g}, []string{"y" + s})
		in = b.Node("Relu", "relu"+s, []string{in}, []string{"r" + s})
	}
	b.Output(in)
	mod, plan := BuildPlan(t, b)
	c := NewCollector(mod, plan)
	x := tensor.New(tensor.Float32, []int{64, units})
	for i := range x.F32() {
		x.F32()[i] = float32(rng.NormFloat64())
	}
	in0 := map[string]*tensor.Tensor{"x": x}
	c.AddInputs(in0)
	if _, err := plan.Run(in0, c.Hook); err != nil {
		t.Fatal(err)
	}
	c.Samples = 64
	col := c.Finish("file")
	plain := 0
	for _, st := range col.Stacks {
		if !st.Merged && len(st.Layers) >= 3 {
			plain++
		}
	}
	if plain == 0 {
		t.Fatalf("no plain stack of 3+ layers through the SiLU chain: %+v", col.Stacks)
	}
	fs := checkOn(t, spreadCollapseCheck, col, nil)
	if len(fs) != 1 {
		t.Fatalf("spread-collapse on the plain SiLU chain: %+v, want one", fs)
	}
	for i := range col.Stacks {
		col.Stacks[i].Merged = true
	}
	if fs := checkOn(t, spreadCollapseCheck, col, nil); len(fs) != 0 {
		t.Fatalf("merged stacks judged: %+v", fs)
	}
}

// A global pooling ends a chain, as a normalisation does: the squeeze
// activation of a squeeze-and-excitation branch (GlobalAveragePool → Conv →
// Relu → Conv → Sigmoid) holds one value per image and channel, the mean of
// H·W positions, whose spread is not comparable with the per-position
// spread of the layer before the pool (averaging P positions divides the
// variance of what varies between positions by up to P). Glorot & Bengio
// 2010 and He et al. 2015 follow the signal through linear layers and
// activations only. Regression: EfficientNet-B0 got a spread-collapse
// warning comparing its stem activation with an SE squeeze activation.
func TestStackEndsAtGlobalPool(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	b := modelbuild.New("se-squeeze", 13)
	b.Input("x", []int{1, 4, 6, 6}, true)
	conv := func(name, in string, co, ci int) string {
		w := make([]float32, co*ci)
		for i := range w {
			w[i] = float32(rng.NormFloat64() * 0.7)
		}
		b.Init("W"+name, []int{co, ci, 1, 1}, w)
		return b.Node("Conv", name, []string{in, "W" + name}, []string{"o" + name})
	}
	a0 := b.Node("Relu", "relu_0", []string{conv("c0", "x", 4, 4)}, []string{"a0"})
	a := b.Node("Relu", "relu_a", []string{conv("c1", a0, 4, 4)}, []string{"a"})
	p := b.Node("GlobalAveragePool", "pool", []string{a}, []string{"p"})
	s := b.Node("Relu", "relu_se", []string{conv("sq", p, 2, 4)}, []string{"s"})
	g := b.Node("Sigmoid", "gate", []string{conv("ex", s, 4, 2)}, []string{"g"})
	m := b.Node("Mul", "scale", []string{g, a}, []string{"m"})
	y := b.Node("Relu", "relu_b", []string{conv("c2", m, 4, 4)}, []string{"y"})
	b.Output(y)
	mod, plan := BuildPlan(t, b)
	c := NewCollector(mod, plan)
	x := tensor.New(tensor.Float32, []int{8, 4, 6, 6})
	for i := range x.F32() {
		x.F32()[i] = float32(rng.NormFloat64())
	}
	in := map[string]*tensor.Tensor{"x": x}
	c.AddInputs(in)
	if _, err := plan.Run(in, c.Hook); err != nil {
		t.Fatal(err)
	}
	col := c.Finish("file")
	var got []string
	for _, st := range col.Stacks {
		var names []string
		for _, l := range st.Layers {
			names = append(names, col.Report.Layers[l].Node)
		}
		got = append(got, strings.Join(names, "→"))
	}
	all := strings.Join(got, " ")
	if strings.Contains(all, "→relu_se") {
		t.Errorf("stacks %v: a chain runs across the global pool into relu_se", got)
	}
	if !strings.Contains(all, "relu_0→relu_a→relu_b") {
		t.Errorf("stacks %v: the signal path relu_0→relu_a→relu_b is missing", got)
	}
}
