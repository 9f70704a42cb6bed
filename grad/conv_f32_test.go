package grad

import (
	"fmt"
	"math"
	"math/rand"
	"runtime"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// TestConvF32MatchesF64: the float32 SGEMM path of Conv's VJP (real
// models) against its float64 path (checked by finite differences), on
// float32 inputs with strides, padding, dilation and groups, over more
// samples than one chunk holds: relative error of each gradient ≤ 1e-5
// (float32 sums: √k·2⁻²⁴ ≈ 1e-6 here).
func TestConvF32MatchesF64(t *testing.T) {
	r := rand.New(rand.NewSource(11))
	f32 := func(shape ...int) *tensor.Tensor {
		x := F64(rnd(r, shape...))
		y := make([]float32, len(x))
		for i, v := range x {
			y[i] = float32(v)
		}
		return tensor.From(y, shape...)
	}
	defer func(c int) { convChunk = c }(convChunk)
	convChunk = 1024 // one or two samples a chunk
	for _, c := range []fdCase{
		{name: "stride2-pad", attrs: []*loader.Attr{ias("strides", 2, 2), ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f32(5, 4, 9, 8), f32(6, 4, 3, 3), f32(6)}},
		{name: "groups-dilated", attrs: []*loader.Attr{ia("group", 2), ias("dilations", 2, 1), ias("pads", 0, 1, 2, 0)}, in: []*tensor.Tensor{f32(3, 4, 7, 6), f32(4, 2, 2, 3), f32(4)}},
		{name: "depthwise", attrs: []*loader.Attr{ia("group", 6), ias("strides", 2, 1), ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f32(3, 6, 7, 6), f32(6, 1, 3, 3), f32(6)}},
		{name: "conv1d", attrs: []*loader.Attr{ias("strides", 3)}, in: []*tensor.Tensor{f32(4, 3, 20), f32(2, 3, 4)}},
		{name: "same3x3", attrs: []*loader.Attr{ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f32(3, 5, 8, 7), f32(6, 5, 3, 3)}},
		{name: "auto-same-upper-stride2", attrs: []*loader.Attr{sa("auto_pad", "SAME_UPPER"), ias("strides", 2, 2)}, in: []*tensor.Tensor{f32(2, 3, 7, 8), f32(4, 3, 3, 3)}},
		{name: "auto-same-lower", attrs: []*loader.Attr{sa("auto_pad", "SAME_LOWER")}, in: []*tensor.Tensor{f32(2, 3, 6, 5), f32(4, 3, 2, 2)}},
		{name: "stride3-dropped-tail", attrs: []*loader.Attr{ias("strides", 3, 2), ias("pads", 0, 1, 0, 0)}, in: []*tensor.Tensor{f32(2, 4, 11, 9), f32(5, 4, 2, 3)}},
		{name: "pad-beyond-span", attrs: []*loader.Attr{ias("pads", 3, 0, 0, 1)}, in: []*tensor.Tensor{f32(2, 3, 5, 5), f32(4, 3, 2, 2)}},
		{name: "conv3d-groups", attrs: []*loader.Attr{ia("group", 2), ias("strides", 1, 2, 1), ias("pads", 1, 0, 1, 0, 1, 1)}, in: []*tensor.Tensor{f32(2, 4, 5, 6, 4), f32(6, 2, 3, 2, 3)}},
		{name: "stride2-dilation2", attrs: []*loader.Attr{ias("strides", 2, 2), ias("dilations", 2, 2), ias("pads", 2, 1, 2, 2)}, in: []*tensor.Tensor{f32(2, 3, 10, 9), f32(4, 3, 3, 3)}},
		{name: "stride3-dilation2-1d", attrs: []*loader.Attr{ias("strides", 3), ias("dilations", 2), ias("pads", 3, 1)}, in: []*tensor.Tensor{f32(2, 3, 17), f32(4, 3, 5)}},
		{name: "stride4-kernel2", attrs: []*loader.Attr{ias("strides", 4, 1)}, in: []*tensor.Tensor{f32(2, 3, 11, 5), f32(4, 3, 2, 2)}},
		{name: "channels17-tails", attrs: []*loader.Attr{ias("pads", 1, 2, 1, 0)}, in: []*tensor.Tensor{f32(2, 17, 7, 5), f32(9, 17, 3, 3)}},
		// ≥ 16 channels: dW through the row-table product (dwRows), over
		// several chunks of samples, in 1, 2 and 3 spatial dimensions
		{name: "rows-stride2-chunks", attrs: []*loader.Attr{ias("strides", 2, 2), ias("pads", 1, 0, 2, 1)}, in: []*tensor.Tensor{f32(2*dwChunk+3, 16, 9, 8), f32(5, 16, 3, 3), f32(5)}},
		{name: "rows-1d", attrs: []*loader.Attr{ias("strides", 2), ias("pads", 1, 1)}, in: []*tensor.Tensor{f32(3, 20, 13), f32(6, 20, 3)}},
		{name: "rows-3d-dilated", attrs: []*loader.Attr{ias("dilations", 2, 1, 1), ias("pads", 1, 0, 1, 1, 1, 0)}, in: []*tensor.Tensor{f32(2, 16, 6, 5, 4), f32(3, 16, 2, 2, 3)}},
		{name: "1x1-stride2", attrs: []*loader.Attr{ias("strides", 2, 2)}, in: []*tensor.Tensor{f32(3, 4, 9, 8), f32(5, 4, 1, 1)}},
	} {
		c.op, c.opset = "Conv", 11
		n := c.node()
		outs := c.forward(t, n, c.in)
		g := F64(rnd(r, outs[0].Size()))
		run := func(f64 bool) [][]float64 {
			forceF64 = f64
			defer func() { forceF64 = false }()
			o := NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: 11}, [][]float64{g}, nil)
			if err := convVJP(o); err != nil {
				t.Fatal(err)
			}
			return o.GIn
		}
		fast, ref := run(false), run(true)
		// the transposed-convolution path for dX is taken wherever its pads are ≥ 0
		if c.name != "depthwise" {
			o := NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: 11}, [][]float64{g}, nil)
			win, err := windowOf(o, c.in[0], outs[0], c.in[1].Shape[2:])
			if err != nil {
				t.Fatal(err)
			}
			G := int(o.Int("group", 1))
			dx := newConvDX(win, c.in[1], c.in[1].F32(), c.in[0].Shape[1], c.in[1].Shape[0], G, 11)
			if (dx == nil) != (c.name == "pad-beyond-span") {
				t.Errorf("%s: transposed convolution for dX: %v", c.name, dx != nil)
			}
		}
		for i := range ref {
			if ref[i] == nil {
				continue
			}
			if e := relErr(fast[i], ref[i], 0); e > 1e-5 || math.IsNaN(e) {
				t.Errorf("%s: input %d: relative error %.2e", c.name, i, e)
			}
		}
	}
}

// TestGemmF32MatchesF64: Gemm's float32 SGEMM path against its float64
// path (checked by finite differences) for every transA/transB and alpha:
// relative error of dA, dB and dC ≤ 1e-5.
func TestGemmF32MatchesF64(t *testing.T) {
	r := rand.New(rand.NewSource(12))
	f32 := func(shape ...int) *tensor.Tensor {
		x := F64(rnd(r, shape...))
		y := make([]float32, len(x))
		for i, v := range x {
			y[i] = float32(v)
		}
		return tensor.From(y, shape...)
	}
	for _, tr := range [][2]int64{{0, 0}, {0, 1}, {1, 0}, {1, 1}} {
		M, K, N := 7, 5, 6
		as, bs := []int{M, K}, []int{K, N}
		if tr[0] == 1 {
			as = []int{K, M}
		}
		if tr[1] == 1 {
			bs = []int{N, K}
		}
		c := fdCase{name: "gemm", op: "Gemm", opset: 13, attrs: []*loader.Attr{ia("transA", tr[0]), ia("transB", tr[1]), fa("alpha", 0.7)},
			in: []*tensor.Tensor{f32(as...), f32(bs...), f32(N)}}
		n := c.node()
		outs := c.forward(t, n, c.in)
		g := F64(rnd(r, outs[0].Size()))
		run := func(f64 bool) [][]float64 {
			forceF64 = f64
			defer func() { forceF64 = false }()
			o := NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: 13}, [][]float64{g}, nil)
			if err := gemmVJP(o); err != nil {
				t.Fatal(err)
			}
			return o.GIn
		}
		fast, ref := run(false), run(true)
		for i := range ref {
			if e := relErr(fast[i], ref[i], 0); ref[i] == nil || e > 1e-5 || math.IsNaN(e) {
				t.Errorf("trans %v: input %d: relative error %.2e", tr, i, e)
			}
		}
	}
}

// TestMulF32MatchesF64: Mul's in-place float32 rule (same shapes, or one
// input repeated over trailing axes) against the general float64 rule
// (checked by finite differences, "mul-bcast") on the same values widened
// to float64: equal within 1e-12 relative (the products are the same;
// only the order of the block sums may differ); a shape it does not take
// falls back and agrees too.
func TestMulF32MatchesF64(t *testing.T) {
	r := rand.New(rand.NewSource(13))
	f32 := func(shape ...int) *tensor.Tensor {
		x := F64(rnd(r, shape...))
		y := make([]float32, len(x))
		for i, v := range x {
			y[i] = float32(v)
		}
		return tensor.From(y, shape...)
	}
	for _, in := range [][]*tensor.Tensor{
		{f32(2, 3, 4, 5), f32(2, 3, 4, 5)},
		{f32(2, 3, 4, 5), f32(2, 3, 1, 1)},
		{f32(2, 3, 1, 1), f32(2, 3, 4, 5)},
		{f32(3, 4), f32(3, 1)},
		{f32(2, 3, 4, 5), f32(1, 3, 1, 1)}, // repeats over N too: general rule
	} {
		c := fdCase{name: "mul", op: "Mul", opset: 14, in: in}
		n := c.node()
		outs := c.forward(t, n, in)
		g := F64(rnd(r, outs[0].Size()))
		o := NewOp(&probe.Call{Node: n, In: in, Out: outs, Opset: 14}, [][]float64{append([]float64(nil), g...)}, nil)
		f, _ := Lookup("", "Mul")
		if err := f(o); err != nil {
			t.Fatal(err)
		}
		wide := []*tensor.Tensor{tensor.From(F64(in[0]), in[0].Shape...), tensor.From(F64(in[1]), in[1].Shape...)}
		ref := NewOp(&probe.Call{Node: n, In: wide, Out: []*tensor.Tensor{tensor.From(F64(outs[0]), outs[0].Shape...)}, Opset: 14}, [][]float64{g}, nil)
		if err := f(ref); err != nil {
			t.Fatal(err)
		}
		for i := range ref.GIn {
			if e := relErr(o.GIn[i], ref.GIn[i], 0); e > 1e-12 || math.IsNaN(e) {
				t.Errorf("%v × %v: input %d: relative error %.2e", in[0].Shape, in[1].Shape, i, e)
			}
		}
	}
}

// TestConvDWSameForAnyWorkers: dW over several chunks of samples is the
// same bit for bit on 1 and 4 workers (each chunk's float32 block, summed
// in chunk order), and within 1e-5 of the float64 path.
func TestConvDWSameForAnyWorkers(t *testing.T) {
	r := rand.New(rand.NewSource(14))
	f32 := func(shape ...int) *tensor.Tensor {
		x := F64(rnd(r, shape...))
		y := make([]float32, len(x))
		for i, v := range x {
			y[i] = float32(v)
		}
		return tensor.From(y, shape...)
	}
	c := fdCase{name: "chunks", op: "Conv", opset: 11, attrs: []*loader.Attr{ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f32(3*dwChunk+5, 6, 6, 5), f32(7, 6, 3, 3)}}
	n := c.node()
	outs := c.forward(t, n, c.in)
	g := F64(rnd(r, outs[0].Size()))
	run := func(procs int, f64 bool) []float64 {
		defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(procs))
		forceF64 = f64
		defer func() { forceF64 = false }()
		o := NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: 11}, [][]float64{g}, nil)
		if err := convVJP(o); err != nil {
			t.Fatal(err)
		}
		return o.GIn[1]
	}
	one, four, ref := run(1, false), run(4, false), run(1, true)
	for i := range one {
		if math.Float64bits(one[i]) != math.Float64bits(four[i]) {
			t.Fatalf("dW[%d]: %v on 1 worker, %v on 4", i, one[i], four[i])
		}
	}
	if e := relErr(one, ref, 0); e > 1e-5 || math.IsNaN(e) {
		t.Errorf("dW: relative error %.2e against the float64 path", e)
	}
}

// BenchmarkConvDW: dL/dW of a 3×3 convolution (pad 1) on a batch of 64
// samples of 32×32 planes, through the row-table product and through the
// packing path.
func BenchmarkConvDW(b *testing.B) {
	for _, sh := range []struct{ C, M, H int }{{16, 16, 32}, {32, 32, 16}, {64, 64, 8}} {
		r := rand.New(rand.NewSource(3))
		N := 64
		x := make([]float32, N*sh.C*sh.H*sh.H)
		g := make([]float32, N*sh.M*sh.H*sh.H)
		for i := range x {
			x[i] = float32(r.NormFloat64())
		}
		for i := range g {
			g[i] = float32(r.NormFloat64())
		}
		win := newWindowFor(b, N, sh.C, sh.H, sh.M)
		gw := make([]float64, sh.M*sh.C*9)
		for _, packed := range []bool{false, true} {
			name := fmt.Sprintf("C%d-M%d-%dx%d/rows", sh.C, sh.M, sh.H, sh.H)
			if packed {
				name = name[:len(name)-4] + "packed"
			}
			b.Run(name, func(b *testing.B) {
				dwPackAlways = packed
				defer func() { dwPackAlways = false }()
				for i := 0; i < b.N; i++ {
					convDW(win, N, sh.C, sh.M, 1, x, g, gw)
				}
			})
		}
	}
}

// newWindowFor is the window of a 3×3 convolution with padding 1 on H×H
// planes (same output size).
func newWindowFor(_ testing.TB, _, _, H, _ int) *window {
	w := &window{in: []int{H, H}, out: []int{H, H}, k: []int{3, 3}, stride: []int{1, 1}, dil: []int{1, 1}, padBeg: []int{1, 1}}
	fillTaps(w)
	return w
}
