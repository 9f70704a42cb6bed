package probe

import (
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// chainTestModel writes the elementwise forms exporters use: GELU as
// PyTorch 1.13 exports nn.GELU (x/√2 by a Constant node, Erf, +1, ·x, ·½),
// the tanh approximation of GELU (Pow(x, 3), Tanh, the constant first in
// some operands), x·sigmoid(x) without a producing Conv, subtraction and
// division with the scalar first, and a chain whose value is also read
// outside it (a graph output inside the chain).
func chainTestModel(b *modelbuild.Builder, shape []int) {
	b.Input("x", shape, true)
	scalar := func(name string, v float32) string {
		b.Init(name, nil, []float32{v})
		return name
	}
	// erf GELU
	b.Node("Constant", "sqrt2", nil, []string{"sqrt2"}, modelbuild.Attr{Name: "value_float", Value: float32(math.Sqrt2)})
	b.Node("Div", "g_div", []string{"x", "sqrt2"}, []string{"g_d"})
	b.Node("Erf", "g_erf", []string{"g_d"}, []string{"g_e"})
	b.Node("Add", "g_add", []string{"g_e", scalar("one", 1)}, []string{"g_a"})
	b.Node("Mul", "g_mul", []string{"x", "g_a"}, []string{"g_m"})
	b.Node("Mul", "g_half", []string{"g_m", scalar("half", 0.5)}, []string{"g"})
	// tanh GELU of g, through an Identity (no chain member: it ends the first chain)
	b.Node("Identity", "g_id", []string{"g"}, []string{"g2"})
	b.Node("Pow", "t_pow", []string{"g2", scalar("three", 3)}, []string{"t_p"})
	b.Node("Mul", "t_c", []string{scalar("c", 0.044715), "t_p"}, []string{"t_pc"})
	b.Node("Add", "t_add", []string{"g2", "t_pc"}, []string{"t_s"})
	b.Node("Mul", "t_k", []string{"t_s", scalar("k", float32(math.Sqrt(2/math.Pi)))}, []string{"t_sk"})
	b.Node("Tanh", "t_tanh", []string{"t_sk"}, []string{"t_t"})
	b.Node("Add", "t_one", []string{"one", "t_t"}, []string{"t_a"})
	b.Node("Mul", "t_gh", []string{"g2", "half"}, []string{"t_h"}) // reads no member: starts a chain of its own
	b.Node("Mul", "t_out", []string{"t_h", "t_a"}, []string{"tg"})
	// x·sigmoid(x) of tg, then s − y and s / y
	b.Node("Sigmoid", "s_sig", []string{"tg"}, []string{"s_s"})
	b.Node("Mul", "s_mul", []string{"s_s", "tg"}, []string{"s"})
	b.Node("Sub", "s_sub", []string{scalar("two", 2), "s"}, []string{"s_2"})
	b.Node("Div", "s_div", []string{scalar("three2", 3), "s_2"}, []string{"y"})
	b.Output("y")
	b.Output("t_t") // inside the tanh chain and read outside it
}

// chainInput: normal values with NaN, ±Inf, ±0, subnormal and huge values
// spread over the tensor (so that every chunk and tail meets some).
func chainInput(r *rand.Rand, shape ...int) *tensor.Tensor {
	x := linRand(r, shape...)
	special := []float32{float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1)), 0, float32(math.Copysign(0, -1)), 1e-40, -1e-40, 1e30, -1e30, 9, -9}
	d := x.F32()
	for i := 0; i < len(d); i += 97 {
		d[i] = special[(i/97)%len(special)]
	}
	return x
}

// The chains compute every hook value with the bits of the unfused steps
// (reference: the same plan with no chain, each step its own kernel), over
// several batches recycling buffers, at sizes below one chunk, across
// chunks and with tails.
func TestChainsSameBits(t *testing.T) {
	r := rand.New(rand.NewSource(5))
	for _, shape := range [][]int{{2, 3, 37}, {4, 5, 1031}} {
		b := modelbuild.New("chains", 13)
		chainTestModel(b, shape)
		_, fused := planOf(t, b)
		_, plain := planOf(t, b)
		plain.chains = nil
		for i := range plain.Steps {
			plain.Steps[i].inChain = false
		}
		// erf GELU (5 members); the tanh GELU without its last two Muls (6:
		// Pow … Add(1, tanh)); Mul(g2, ½), Mul(t_h, t_a), the SiLU, Sub, Div (6)
		var sizes []int
		for i := range fused.Steps {
			if ch := fused.chains[i]; ch != nil {
				sizes = append(sizes, len(ch.members))
			}
		}
		if len(sizes) != 3 || sizes[0] != 5 || sizes[1] != 6 || sizes[2] != 6 {
			t.Fatalf("chain sizes %v, want [5 6 6]", sizes)
		}
		batches := []*tensor.Tensor{chainInput(r, shape...), chainInput(r, shape...)}
		a, c := recordRun(t, fused, batches), recordRun(t, plain, batches)
		sameRecords(t, a, c)
	}
}

// With values declared unobserved, a chain leaves out those only it reads:
// the hook gets nil for them, the same bits for every other value; a
// declared value read outside the chain (t_t, a graph output) is still
// written.
func TestChainElidesUnobserved(t *testing.T) {
	r := rand.New(rand.NewSource(6))
	b := modelbuild.New("chains", 13)
	chainTestModel(b, []int{3, 2, 777})
	_, fused := planOf(t, b)
	_, plain := planOf(t, b)
	plain.chains = nil
	for i := range plain.Steps {
		plain.Steps[i].inChain = false
	}
	skip := map[string]bool{"g_d": true, "g_e": true, "g_a": true, "g_m": true, "t_t": true, "s_s": true}
	x := chainInput(r, 3, 2, 777)
	var got []hookRecord
	nilSeen := map[string]bool{}
	hook := func(n *loader.Node, outs []*tensor.Tensor) error {
		rec := hookRecord{node: n.Name}
		for _, o := range outs {
			if o == nil {
				nilSeen[n.Outputs[0]] = true
				rec.outs = append(rec.outs, nil)
				continue
			}
			rec.outs = append(rec.outs, append([]float32{}, o.F32()...))
		}
		got = append(got, rec)
		return nil
	}
	for rep := 0; rep < 2; rep++ { // twice: the second run reuses pooled buffers
		got, nilSeen = nil, map[string]bool{}
		pool := tensor.NewPool(1 << 30)
		arena := &tensor.Arena{Pool: pool}
		if _, _, err := fused.RunRecycled(arena, map[string]*tensor.Tensor{"x": x}, hook, pool.Put, skip); err != nil {
			t.Fatal(err)
		}
	}
	want := map[string]bool{"g_d": true, "g_e": true, "g_a": true, "g_m": true, "s_s": true}
	if len(nilSeen) != len(want) {
		t.Fatalf("nil values %v, want %v", nilSeen, want)
	}
	for v := range want {
		if !nilSeen[v] {
			t.Fatalf("nil values %v, want %v", nilSeen, want)
		}
	}
	ref := recordRun(t, plain, []*tensor.Tensor{x})
	for k := range got {
		for o := range got[k].outs {
			if got[k].outs[o] == nil {
				ref[k].outs[o] = nil // left out on purpose
			}
		}
	}
	sameRecords(t, got, ref)
}

// A chain whose operands turn out at run time to broadcast (here a [1, W]
// operand) runs step by step, with the same values.
func TestChainFallsBackOnBroadcast(t *testing.T) {
	r := rand.New(rand.NewSource(7))
	b := modelbuild.New("chainbc", 13)
	b.Input("x", []int{3, 5, 9}, true)
	b.Input("row", []int{1, 9}, true)
	b.Node("Erf", "e", []string{"x"}, []string{"e"})
	b.Node("Mul", "m", []string{"e", "row"}, []string{"m"})
	b.Node("Tanh", "th", []string{"m"}, []string{"y"})
	b.Output("y")
	_, fused := planOf(t, b)
	if len(fused.chains) != 1 {
		t.Fatalf("%d chains, want 1", len(fused.chains))
	}
	x, row := linRand(r, 3, 5, 9), linRand(r, 1, 9)
	out, err := fused.Run(map[string]*tensor.Tensor{"x": x, "row": row}, nil)
	if err != nil {
		t.Fatal(err)
	}
	y := out["y"].F32()
	for i, v := range x.F32() {
		e := float32(math.Erf(float64(v)))
		w := float32(math.Tanh(float64(e * row.F32()[i%9])))
		if math.Abs(float64(y[i]-w)) > 1e-6 {
			t.Fatalf("y[%d] = %g, want %g", i, y[i], w)
		}
	}
}

// BenchmarkChainGelu times PyTorch's erf GELU on a ConvNeXt-sized hidden
// tensor (batch 8, 56×56 positions, 384 features): the five steps one by
// one, the chain writing every value, and the chain writing only its
// result (the inner values unobserved, as vitals check runs it).
func BenchmarkChainGelu(b *testing.B) {
	shape := []int{8, 56 * 56, 384}
	mb := modelbuild.New("gelu", 13)
	mb.Input("x", shape, true)
	mb.Init("sqrt2", nil, []float32{math.Sqrt2})
	mb.Init("one", nil, []float32{1})
	mb.Init("half", nil, []float32{0.5})
	mb.Node("Div", "d", []string{"x", "sqrt2"}, []string{"d"})
	mb.Node("Erf", "e", []string{"d"}, []string{"e"})
	mb.Node("Add", "a", []string{"e", "one"}, []string{"a"})
	mb.Node("Mul", "m", []string{"x", "a"}, []string{"m"})
	mb.Node("Mul", "y", []string{"m", "half"}, []string{"y"})
	mb.Output("y")
	x := linRand(rand.New(rand.NewSource(1)), shape...)
	for _, mode := range []string{"steps", "chain", "chain-unobserved"} {
		_, p := planOf(b, mb)
		var skip map[string]bool
		switch mode {
		case "steps":
			p.chains = nil
			for i := range p.Steps {
				p.Steps[i].inChain = false
			}
		case "chain-unobserved":
			skip = map[string]bool{"d": true, "e": true, "a": true, "m": true}
		}
		b.Run(mode, func(b *testing.B) {
			pool := tensor.NewPool(1 << 31)
			arena := &tensor.Arena{Pool: pool}
			b.SetBytes(int64(4 * x.Size()))
			for b.Loop() {
				outs, released, err := p.RunRecycled(arena, map[string]*tensor.Tensor{"x": x}, nil, pool.Put, skip)
				if err != nil {
					b.Fatal(err)
				}
				pool.Recycle(released, []*tensor.Tensor{x, outs["y"]})
			}
		})
	}
}
