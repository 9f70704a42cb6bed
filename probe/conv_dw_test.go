package probe

import (
	"fmt"
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// The vector row kernels of every level available on this CPU against
// dw3RowGo, on lengths around the vector widths (tails included).
func TestDw3RowVecMatchesGo(t *testing.T) {
	r := rand.New(rand.NewSource(21))
	saved := dwVecLevel
	defer func() { dwVecLevel = saved }()
	for level := saved; level >= 0; level-- {
		dwVecLevel = level
		for _, sw := range []int{1, 2} {
			for n := 1; n <= 70; n++ {
				need := (n-1)*sw + 3
				var rows [3][]float32
				for k := range rows {
					rows[k] = linRand(r, need+5).F32()[:need]
				}
				var wb [10]float32 // 9 weights, bias
				for i := range wb {
					wb[i] = float32(r.NormFloat64())
				}
				got := make([]float32, n+1)
				got[n] = 99 // must stay untouched
				dw3Row(got[:n], rows[0], rows[1], rows[2], &wb, sw)
				want := make([]float32, n)
				dw3RowGo(want, rows[0], rows[1], rows[2], &wb, sw)
				closeF32(t, fmt.Sprintf("level %d stride %d n %d", level, sw, n), got[:n], want, 1e-5)
				if got[n] != 99 {
					t.Fatalf("level %d stride %d n %d wrote past dst", level, sw, n)
				}
			}
		}
	}
}

// dwConv runs one depthwise Conv node through convKernel.
func dwConv(t *testing.T, attrs map[string]*loader.Attr, in ...*tensor.Tensor) []float32 {
	t.Helper()
	c := fastCall("Conv", attrs, 11, []string{"X", "W", "B"}[:len(in)], nil, in...)
	if err := convKernel(c); err != nil {
		t.Fatal(err)
	}
	return c.Out[0].F32()
}

// The depthwise path (vector rows at each CPU level, Go rows, generic taps)
// against the reference convolution (im2col + linGemmT, convUseReference)
// and against the tap-by-tap dwGenericPlane, on odd sizes, strides 1 and 2
// (and 3), short rows (dw3x3FlatPlane) and long ones (dw3x3Plane), paddings 0..2 per side, channel multipliers 1 and 2, with
// and without bias, on output buffers that start out full of garbage.
func TestConvDepthwiseMatchesReference(t *testing.T) {
	r := rand.New(rand.NewSource(22))
	saved := dwVecLevel
	defer func() { dwVecLevel = saved }()
	pool := tensor.NewPool(1 << 30)
	testArena = &tensor.Arena{Pool: pool}
	defer func() { testArena = nil }()
	type tc struct{ N, C, mult, H, W, K, sh, sw int }
	cases := []tc{
		{2, 3, 1, 37, 41, 3, 1, 1},
		{1, 2, 1, 38, 45, 3, 2, 2},
		{1, 3, 2, 17, 35, 3, 1, 2},
		{1, 2, 1, 35, 19, 3, 2, 1},
		{1, 2, 1, 3, 3, 3, 1, 1},
		{1, 2, 1, 1, 2, 3, 2, 2},
		{1, 2, 1, 23, 70, 3, 3, 3},
		{2, 2, 1, 13, 33, 5, 2, 2},
		{1, 3, 1, 112, 112, 3, 1, 1},
		{2, 3, 2, 9, 14, 3, 1, 1},  // flat path (rows under dwFlatWidth)
		{1, 2, 1, 30, 29, 3, 1, 1}, // flat path, rows of 27..31 outputs
		{1, 2, 1, 7, 7, 3, 1, 1},
	}
	for i, k := range cases {
		for pads := 0; pads < 81; pads += 1 + r.Intn(4) {
			pt, pl, pb, pr := pads%3, pads/3%3, pads/9%3, pads/27%3
			if k.H+pt+pb < k.K || k.W+pl+pr < k.K {
				continue
			}
			M := k.C * k.mult
			x, w, b := linRand(r, k.N, k.C, k.H, k.W), linRand(r, M, 1, k.K, k.K), linRand(r, M)
			attrs := map[string]*loader.Attr{
				"group":   {Name: "group", Kind: loader.AttrInt, I: int64(k.C)},
				"strides": linInts("strides", int64(k.sh), int64(k.sw)),
				"pads":    linInts("pads", int64(pt), int64(pl), int64(pb), int64(pr)),
			}
			for _, withBias := range []bool{false, true} {
				in := []*tensor.Tensor{x, w}
				if withBias {
					in = append(in, b)
				}
				var want []float32
				withReference(func() { want = dwConv(t, attrs, in...) })
				for level := saved; level >= 0; level-- {
					dwVecLevel = level
					got := dwConv(t, attrs, in...)
					what := fmt.Sprintf("case %d %+v pads %d %d %d %d bias=%v level %d", i, k, pt, pl, pb, pr, withBias, level)
					closeF32(t, what+" vs reference", got, want, 1e-4)
					// the generic tap loop on the same geometry
					if level == 0 {
						gen := dwGenericReference(t, attrs, in...)
						closeF32(t, what+" vs dwGenericPlane", got, gen, 1e-5)
					}
					// garbage in the recycled buffers must not leak into the next run
					for _, v := range []*tensor.Tensor{tensor.From(got, len(got))} {
						for j := range got {
							got[j] = float32(j%7) * 1e30
						}
						pool.Recycle([]*tensor.Tensor{v}, nil)
					}
				}
			}
		}
	}
}

// dwGenericReference is the depthwise convolution computed with
// dwGenericPlane alone, onto a bias prefill (the code this file replaced).
func dwGenericReference(t *testing.T, attrs map[string]*loader.Attr, in ...*tensor.Tensor) []float32 {
	t.Helper()
	x, w := in[0], in[1]
	c := fastCall("Conv", attrs, 11, nil, nil, in...)
	g, err := convAttrs(c, 2, w.Shape[2:])
	if err != nil {
		t.Fatal(err)
	}
	g.in = x.Shape[2:]
	g.clonePads()
	if err := convForwardOut(&g, "NOTSET", false); err != nil {
		t.Fatal(err)
	}
	N, C, M := x.Shape[0], x.Shape[1], w.Shape[0]
	H, W, OH, OW, K := g.in[0], g.in[1], g.out[0], g.out[1], g.k[0]
	y := make([]float32, N*M*OH*OW)
	for n := 0; n < N; n++ {
		for m := 0; m < M; m++ {
			p := y[(n*M+m)*OH*OW : (n*M+m+1)*OH*OW]
			if len(in) > 2 {
				for j := range p {
					p[j] = in[2].F32()[m]
				}
			}
			ci := m / (M / C)
			dwGenericPlane(p, x.F32()[(n*C+ci)*H*W:(n*C+ci+1)*H*W], w.F32()[m*K*K:(m+1)*K*K], H, W, OH, OW, K, K, &g, 0, OH, 0, OW)
		}
	}
	return y
}

// Conv's float32 output comes from tensor.NewUninit, so every path of
// convFastF32 must write every element: the GEMM paths (1×1 direct,
// im2col, grouped), without bias (beta = 0) and with, on recycled buffers
// full of garbage, against the reference convolution.
func TestConvFastWritesEveryElement(t *testing.T) {
	r := rand.New(rand.NewSource(23))
	pool := tensor.NewPool(1 << 30)
	testArena = &tensor.Arena{Pool: pool}
	defer func() { testArena = nil }()
	type tc struct{ C, M, group, H, W, K, s, pad int }
	for i, k := range []tc{{16, 32, 1, 16, 16, 1, 1, 0}, {8, 16, 1, 17, 15, 3, 1, 1}, {8, 16, 2, 18, 18, 3, 2, 1}, {4, 8, 1, 33, 31, 1, 2, 0}} {
		x, w, b := linRand(r, 2, k.C, k.H, k.W), linRand(r, k.M, k.C/k.group, k.K, k.K), linRand(r, k.M)
		p := int64(k.pad)
		attrs := map[string]*loader.Attr{
			"group":   {Name: "group", Kind: loader.AttrInt, I: int64(k.group)},
			"strides": linInts("strides", int64(k.s), int64(k.s)),
			"pads":    linInts("pads", p, p, p, p),
		}
		for _, in := range [][]*tensor.Tensor{{x, w}, {x, w, b}} {
			var want []float32
			withReference(func() { want = dwConv(t, attrs, in...) })
			for rep := 0; rep < 3; rep++ {
				got := dwConv(t, attrs, in...)
				closeF32(t, fmt.Sprintf("case %d %+v inputs %d rep %d", i, k, len(in), rep), got, want, 1e-4)
				for j := range got {
					got[j] = float32(math.NaN())
				}
				pool.Recycle([]*tensor.Tensor{tensor.From(got, len(got))}, nil)
			}
		}
	}
}
