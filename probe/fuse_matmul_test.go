package probe

import (
	"fmt"
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// geluModel is x [batch, seq, k] → MatMul(W [k, n]) → Add of a bias [n] →
// the erf GELU as PyTorch 1.13 exports nn.GELU (Div by √2, Erf, Add 1,
// Mul by x, Mul by ½: the form of the benchmark encoder,
// bench/gen/export.py) → MatMul(W2 [n, k]) → Add(., bias2) (a bias Add
// alone), with the scalars as Constant steps between, as the exporter
// writes them. swap puts every commutative operand in the other order.
func geluModel(r *rand.Rand, batch, seq, k, n int, swap bool) *modelbuild.Builder {
	b := modelbuild.New("gelu", 14)
	b.Input("x", []int{batch, seq, k}, true)
	// weights of variance 1/fan-in (common practice), so that u is about
	// as spread as x
	scaled := func(rows, cols int) []float32 {
		w := linRand(r, rows, cols).F32()
		for i := range w {
			w[i] /= float32(math.Sqrt(float64(rows)))
		}
		return w
	}
	b.Init("w", []int{k, n}, scaled(k, n))
	bias := linRand(r, n)
	bias.F32()[0] = float32(math.Inf(1))
	bias.F32()[1] = float32(math.Copysign(0, -1))
	// a NaN whose payload differs from the product's NaN (from x's): the
	// sum keeps its first operand's, so the operand order shows
	bias.F32()[2] = math.Float32frombits(0x7fc00123)
	b.Init("bias", []int{n}, bias.F32())
	b.Init("w2", []int{n, k}, scaled(n, k))
	bias2 := linRand(r, k)
	bias2.F32()[1] = math.Float32frombits(0xffc00321)
	b.Init("bias2", []int{k}, bias2.F32())
	ord := func(a, c string) []string {
		if swap {
			return []string{c, a}
		}
		return []string{a, c}
	}
	scalar := func(name string, v float32) {
		b.Node("Constant", name, nil, []string{name}, modelbuild.Attr{Name: "value_float", Value: v})
	}
	b.Node("MatMul", "mm", []string{"x", "w"}, []string{"p"})
	b.Node("Add", "bias_add", ord("bias", "p"), []string{"u"})
	scalar("sqrt2", 1.4142135)
	b.Node("Div", "div", []string{"u", "sqrt2"}, []string{"d"})
	b.Node("Erf", "erf", []string{"d"}, []string{"e"})
	scalar("one", 1)
	b.Node("Add", "add1", ord("e", "one"), []string{"a"})
	b.Node("Mul", "mul", ord("u", "a"), []string{"m"})
	scalar("half", 0.5)
	b.Node("Mul", "half_mul", ord("m", "half"), []string{"y"})
	b.Node("MatMul", "mm2", []string{"y", "w2"}, []string{"p2"})
	b.Node("Add", "bias_add2", ord("p2", "bias2"), []string{"out"})
	b.Output("out")
	return b
}

// unfused clears every fusion link of p: each node runs its own kernel
// (the reference of the fused runs).
func unfused(p *Plan) *Plan {
	for i := range p.Steps {
		p.Steps[i].fuseWith, p.Steps[i].fuseMul, p.Steps[i].fuseChain = -1, -1, nil
	}
	return p
}

// chainsOf names each MatMul's fused steps (tests).
func chainsOf(p *Plan) map[string]string {
	got := map[string]string{}
	for _, s := range p.Steps {
		for k, j := range s.fuseChain {
			if k > 0 {
				got[s.Node.Name] += "+"
			}
			got[s.Node.Name] += p.Steps[j].Node.Name
		}
	}
	return got
}

// The bias Add and the GELU fuse into the MatMul, and the hook sees exactly
// the values of the unfused run (reference: the same plan with its fusion
// links removed), bit for bit, in node order: on the row-blocked product
// (1024 rows) and the whole one (few rows), odd sizes, both operand orders,
// and inputs with NaN, ±Inf and −0 (a NaN and an infinity in the bias too).
func TestFusionMatMulGELUHookSeesUnfusedValues(t *testing.T) {
	for _, tc := range []struct {
		batch, seq, k, n int
		swap             bool
	}{
		{8, 128, 64, 200, false},
		{8, 128, 64, 200, true},
		{3, 67, 33, 77, false}, // 201 rows: two blocks, the last with the remainder
		{1, 5, 7, 19, true},    // whole product
		{2, 100, 40, 3, false}, // n < 16: only scalar tails
		{2, 100, 40, 3, true},
	} {
		t.Run(fmt.Sprintf("%dx%dx%dx%d-swap%v", tc.batch, tc.seq, tc.k, tc.n, tc.swap), func(t *testing.T) {
			r := rand.New(rand.NewSource(7))
			b := geluModel(r, tc.batch, tc.seq, tc.k, tc.n, tc.swap)
			_, fused := planOf(t, b)
			_, plain := planOf(t, b)
			unfused(plain)
			want := map[string]string{"mm": "bias_add+div+erf+add1+mul+half_mul", "mm2": "bias_add2"}
			if got := chainsOf(fused); fmt.Sprint(got) != fmt.Sprint(want) {
				t.Fatalf("fused %v, want %v", got, want)
			}
			var batches []*tensor.Tensor
			for i := 0; i < 2; i++ {
				x := linRand(r, tc.batch, tc.seq, tc.k)
				xs := x.F32()
				for j := range xs {
					xs[j] *= 3 // reach erf's saturated ends
				}
				xs[3] = float32(math.NaN())
				xs[len(xs)-1] = float32(math.Inf(-1))
				xs[len(xs)/2] = float32(math.Copysign(0, -1))
				xs[len(xs)/3] = float32(math.Inf(1))
				batches = append(batches, x)
			}
			compareRuns(t, recordRun(t, fused, batches), recordRun(t, plain, batches), 2*len(plain.Steps))
		})
	}
}

// compareRuns fails unless the two hook records agree bit for bit.
func compareRuns(t *testing.T, a, c []hookRecord, calls int) {
	t.Helper()
	if len(a) != len(c) || len(a) != calls {
		t.Fatalf("%d hook calls fused, %d unfused, want %d", len(a), len(c), calls)
	}
	for k := range c {
		if a[k].node != c[k].node {
			t.Fatalf("hook call %d: node %q, unfused %q", k, a[k].node, c[k].node)
		}
		for o := range c[k].outs {
			if len(a[k].outs[o]) != len(c[k].outs[o]) {
				t.Fatalf("node %q output %d: %d values, unfused %d", a[k].node, o, len(a[k].outs[o]), len(c[k].outs[o]))
			}
			for e, w := range c[k].outs[o] {
				if g := a[k].outs[o][e]; math.Float32bits(g) != math.Float32bits(w) {
					t.Fatalf("node %q element %d = %g (%#x), unfused %g (%#x)", c[k].node, e, g, math.Float32bits(g), w, math.Float32bits(w))
				}
			}
		}
	}
}

// What does not fuse: a product read twice, a chain value read by a second
// node, a bias that is computed after the MatMul, a GELU whose Div is by
// a non-constant.
func TestFusionMatMulDeclines(t *testing.T) {
	r := rand.New(rand.NewSource(3))
	b := modelbuild.New("nofuse", 14)
	b.Input("x", []int{4, 8}, true)
	b.Init("w", []int{8, 8}, linRand(r, 8, 8).F32())
	b.Init("bias", []int{8}, linRand(r, 8).F32())
	// product read by the Add and a Relu
	b.Node("MatMul", "m0", []string{"x", "w"}, []string{"p0"})
	b.Node("Add", "a0", []string{"p0", "bias"}, []string{"u0"})
	b.Node("Relu", "r0", []string{"p0"}, []string{"q0"})
	// bias computed after the MatMul
	b.Node("MatMul", "m1", []string{"u0", "w"}, []string{"p1"})
	b.Node("Relu", "late", []string{"bias"}, []string{"lb"})
	b.Node("Add", "a1", []string{"p1", "lb"}, []string{"u1"})
	// GELU whose Erf output is read twice: the Add fuses, the GELU does not
	b.Node("MatMul", "m2", []string{"u1", "w"}, []string{"p2"})
	b.Node("Add", "a2", []string{"p2", "bias"}, []string{"u2"})
	b.Init("s2", nil, []float32{1.4142135})
	b.Init("one", nil, []float32{1})
	b.Init("half", nil, []float32{0.5})
	b.Node("Div", "d2", []string{"u2", "s2"}, []string{"dd"})
	b.Node("Erf", "e2", []string{"dd"}, []string{"ee"})
	b.Node("Add", "o2", []string{"ee", "one"}, []string{"aa"})
	b.Node("Mul", "x2", []string{"u2", "aa"}, []string{"mm"})
	b.Node("Mul", "h2", []string{"mm", "half"}, []string{"yy"})
	b.Node("Add", "sum", []string{"yy", "ee"}, []string{"z"})
	b.Node("Add", "fin", []string{"z", "q0"}, []string{"out"})
	b.Output("out")
	_, p := planOf(t, b)
	want := map[string]string{"m2": "a2"}
	if got := chainsOf(p); fmt.Sprint(got) != fmt.Sprint(want) {
		t.Fatalf("fused %v, want %v", got, want)
	}
	_, plain := planOf(t, b)
	x := linRand(r, 4, 8)
	compareRuns(t, recordRun(t, p, []*tensor.Tensor{x}), recordRun(t, unfused(plain), []*tensor.Tensor{x}), len(p.Steps))
}

// BenchmarkMatMulGELU runs the encoder's feed-forward block (batch × 128
// tokens, d 256, 1024 hidden: linear1, bias, GELU, linear2, bias) fused and
// unfused, with an empty hook, reusing released buffers as vitals check
// does. Modes: unfused (every step its own kernel), fused (bias and GELU
// into the MatMul, row-blocked product), fused-whole (product whole, then
// the chain in blocks), bias-only and bias-whole (the GELU's steps run
// their kernels).
func BenchmarkMatMulGELU(b *testing.B) {
	for _, batch := range []int{1, 8} {
		for _, mode := range []string{"unfused", "fused", "fused-whole", "bias-only", "bias-whole"} {
			b.Run(fmt.Sprintf("b%d-%s", batch, mode), func(b *testing.B) {
				defer func(w, g bool) { chainWhole, chainNoGELU = w, g }(chainWhole, chainNoGELU)
				chainWhole = mode == "fused-whole" || mode == "bias-whole"
				chainNoGELU = mode == "bias-only" || mode == "bias-whole"
				r := rand.New(rand.NewSource(1))
				m := BuiltModel(b, geluModel(r, batch, 128, 256, 1024, true))
				p, err := Compile(m)
				if err != nil {
					b.Fatal(err)
				}
				if mode == "unfused" {
					unfused(p)
				}
				x := linRand(r, batch, 128, 256)
				pool := tensor.NewPool(1 << 30)
				arena := &tensor.Arena{Pool: pool}
				hook := func(*loader.Node, []*tensor.Tensor) error { return nil }
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					outs, released, err := p.RunRecycled(arena, map[string]*tensor.Tensor{"x": x}, hook, pool.Put)
					if err != nil {
						b.Fatal(err)
					}
					keep := []*tensor.Tensor{x}
					for _, o := range outs {
						keep = append(keep, o)
					}
					pool.Recycle(released, keep)
				}
			})
		}
	}
}
