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
