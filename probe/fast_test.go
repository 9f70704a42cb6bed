package probe

import (
	"fmt"
	"math"
	"math/rand"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Tests of the float32 fast paths against the reference paths (gonum SGEMM,
// generic im2col convolution, generic broadcasting loops) on odd shapes.

// fastCall is a call whose inputs named in consts are initializers of a
// minimal plan, so the packed-weight cache is used.
func fastCall(op string, attrs map[string]*loader.Attr, opset int, names []string, consts map[string]bool, in ...*tensor.Tensor) *Call {
	c := linTestCall(op, attrs, opset, in...)
	c.Node.Inputs = names
	inits := map[string]*tensor.Tensor{}
	ptrs := map[*tensor.Tensor]bool{}
	for i, nm := range names {
		if consts[nm] && in[i] != nil {
			inits[nm] = in[i]
			ptrs[in[i]] = true
		}
	}
	c.run = &runState{plan: &Plan{Graph: &loader.Graph{Initializers: inits}, consts: ptrs}, arena: testArena}
	return c
}

// withReference runs f with the reference GEMM and convolution paths.
func withReference(f func()) {
	linGemmReference, convUseReference = true, true
	defer func() { linGemmReference, convUseReference = false, false }()
	f()
}

func closeF32(t *testing.T, what string, got, want []float32, tol float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: %d values, want %d", what, len(got), len(want))
	}
	for i, w := range want {
		g := got[i]
		if math.IsNaN(float64(w)) && math.IsNaN(float64(g)) {
			continue
		}
		if math.Abs(float64(g-w)) > tol*(1+math.Abs(float64(w))) {
			t.Fatalf("%s: element %d = %g, want %g", what, i, g, w)
		}
	}
}

func TestConvFastMatchesReference(t *testing.T) {
	r := rand.New(rand.NewSource(11))
	type tc struct{ N, C, M, group, H, W, KH, KW, sh, sw, dh, dw, pt, pl, pb, pr int }
	cases := []tc{
		{2, 5, 7, 1, 9, 11, 3, 3, 1, 1, 1, 1, 1, 1, 1, 1},  // 3×3 same
		{1, 3, 5, 1, 13, 10, 7, 7, 2, 2, 1, 1, 3, 3, 3, 3}, // stem-like
		{3, 6, 4, 1, 5, 7, 1, 1, 1, 1, 1, 1, 0, 0, 0, 0},   // 1×1 direct
		{2, 6, 4, 1, 9, 7, 1, 1, 2, 2, 1, 1, 0, 0, 0, 0},   // 1×1 stride 2
		{2, 7, 7, 7, 9, 11, 3, 3, 1, 1, 1, 1, 1, 1, 1, 1},  // depthwise s1
		{2, 7, 7, 7, 10, 9, 3, 3, 2, 2, 1, 1, 1, 1, 1, 1},  // depthwise s2
		{1, 5, 5, 5, 11, 8, 3, 3, 2, 1, 1, 1, 0, 1, 1, 0},  // depthwise s2×1, odd pads
		{2, 4, 8, 4, 6, 6, 3, 3, 1, 1, 1, 1, 1, 1, 1, 1},   // channel multiplier 2
		{1, 3, 3, 3, 2, 2, 3, 3, 1, 1, 1, 1, 1, 1, 1, 1},   // depthwise, image smaller than the window
		{1, 4, 4, 4, 9, 9, 5, 5, 1, 2, 2, 1, 4, 2, 4, 2},   // depthwise 5×5 dilated
		{2, 8, 6, 2, 7, 9, 3, 2, 2, 1, 1, 2, 1, 0, 0, 1},   // grouped
		{1, 16, 9, 1, 33, 31, 3, 3, 1, 1, 1, 1, 1, 1, 1, 1},
		{2, 3, 5, 1, 47, 50, 3, 3, 1, 1, 1, 1, 1, 1, 1, 1}, // P ≥ convBatchMinP: one product per image
		{2, 4, 6, 2, 46, 48, 3, 3, 1, 1, 2, 2, 2, 2, 2, 2}, // the same, grouped and dilated
		{3, 5, 4, 1, 6, 5, 1, 1, 1, 1, 1, 1, 0, 0, 0, 0},   // 1×1 direct, small plane (per-image products too)
		{2, 3, 4, 1, 20, 70, 7, 7, 2, 2, 1, 1, 3, 3, 3, 3}, // stride-2 stem on widened rows (phase planes)
		{3, 4, 6, 2, 9, 41, 3, 3, 1, 1, 1, 1, 1, 1, 1, 1},  // widened rows shared across images, grouped
	}
	for trial := 0; trial < 20; trial++ {
		g := []int{1, 2, 3}[r.Intn(3)]
		C := g * (1 + r.Intn(4))
		cases = append(cases, tc{1 + r.Intn(3), C, g * (1 + r.Intn(4)), g, 1 + r.Intn(12), 1 + r.Intn(12), 1 + r.Intn(4), 1 + r.Intn(4),
			1 + r.Intn(3), 1 + r.Intn(3), 1 + r.Intn(2), 1 + r.Intn(2), r.Intn(3), r.Intn(3), r.Intn(3), r.Intn(3)})
	}
	for i, k := range cases {
		if (k.H+k.pt+k.pb-((k.KH-1)*k.dh+1)) < 0 || (k.W+k.pl+k.pr-((k.KW-1)*k.dw+1)) < 0 {
			continue
		}
		x, w, b := linRand(r, k.N, k.C, k.H, k.W), linRand(r, k.M, k.C/k.group, k.KH, k.KW), linRand(r, k.M)
		attrs := map[string]*loader.Attr{
			"group":     {Name: "group", Kind: loader.AttrInt, I: int64(k.group)},
			"strides":   linInts("strides", int64(k.sh), int64(k.sw)),
			"dilations": linInts("dilations", int64(k.dh), int64(k.dw)),
			"pads":      linInts("pads", int64(k.pt), int64(k.pl), int64(k.pb), int64(k.pr)),
		}
		for _, withBias := range []bool{false, true} {
			for _, constW := range []bool{false, true} {
				in := []*tensor.Tensor{x, w}
				if withBias {
					in = append(in, b)
				}
				names := []string{"X", "W", "B"}[:len(in)]
				var want []float32
				withReference(func() {
					c := fastCall("Conv", attrs, 11, names, nil, in...)
					if err := convKernel(c); err != nil {
						t.Fatal(err)
					}
					want = c.Out[0].F32()
				})
				for rep := 0; rep < 3; rep++ { // the second run reads the packed cache
					saved := convBatchScratch
					if rep == 2 { // small planes: products shared by runs of two images
						convBatchScratch = 2 * (k.M / k.group) * (k.H + k.pt + k.pb) * (k.W + k.pl + k.pr)
					}
					c := fastCall("Conv", attrs, 11, names, map[string]bool{"W": constW, "B": constW}, in...)
					err := convKernel(c)
					convBatchScratch = saved
					if err != nil {
						t.Fatal(err)
					}
					closeF32(t, fmt.Sprintf("case %d %+v bias=%v const=%v", i, k, withBias, constW), c.Out[0].F32(), want, 1e-4)
					if rep == 0 && havePackRun {
						// the vector panel copy writes exactly what the Go copy does
						havePackRun = false
						g := fastCall("Conv", attrs, 11, names, map[string]bool{"W": constW, "B": constW}, in...)
						err := convKernel(g)
						havePackRun = true
						if err != nil {
							t.Fatal(err)
						}
						closeF32(t, fmt.Sprintf("case %d %+v bias=%v const=%v, Go panel copy", i, k, withBias, constW), g.Out[0].F32(), c.Out[0].F32(), 0)
					}
				}
			}
		}
	}
}

func TestConvFast1D3D(t *testing.T) {
	r := rand.New(rand.NewSource(12))
	for _, shape := range [][]int{{2, 4, 9}, {1, 3, 5, 6, 7}} {
		nd := len(shape) - 2
		for _, group := range []int{1, shape[1]} {
			ws := []int{6, shape[1] / group}
			if group > 1 {
				ws[0] = shape[1]
			}
			for i := 0; i < nd; i++ {
				ws = append(ws, 3)
			}
			x, w := linRand(r, shape...), linRand(r, ws...)
			pads := make([]int64, 2*nd)
			for i := range pads {
				pads[i] = int64(r.Intn(2))
			}
			attrs := map[string]*loader.Attr{"group": {Name: "group", Kind: loader.AttrInt, I: int64(group)}, "pads": linInts("pads", pads...)}
			var want []float32
			withReference(func() {
				c := fastCall("Conv", attrs, 11, []string{"X", "W"}, nil, x, w)
				if err := convKernel(c); err != nil {
					t.Fatal(err)
				}
				want = c.Out[0].F32()
			})
			c := fastCall("Conv", attrs, 11, []string{"X", "W"}, map[string]bool{"W": true}, x, w)
			if err := convKernel(c); err != nil {
				t.Fatal(err)
			}
			closeF32(t, fmt.Sprint(shape, group), c.Out[0].F32(), want, 1e-4)
		}
	}
}

func TestMatMulGemmPackedMatchesReference(t *testing.T) {
	r := rand.New(rand.NewSource(13))
	for _, as := range [][]int{{7}, {5, 7}, {3, 5, 7}, {2, 1, 33, 7}, {0, 7}} {
		a, b := linRand(r, as...), linRand(r, 7, 19)
		var want []float32
		withReference(func() {
			c := fastCall("MatMul", nil, 13, []string{"A", "B"}, nil, a, b)
			if err := matMulKernel(c); err != nil {
				t.Fatal(err)
			}
			want = c.Out[0].F32()
		})
		c := fastCall("MatMul", nil, 13, []string{"A", "B"}, map[string]bool{"B": true}, a, b)
		if err := matMulKernel(c); err != nil {
			t.Fatal(err)
		}
		closeF32(t, fmt.Sprint("MatMul ", as), c.Out[0].F32(), want, 1e-5)
	}
	// batched products on both sides, with broadcasting (attention-shaped):
	// whole products spread over the cores
	for _, s := range [][2][]int{{{2, 3, 17, 8}, {2, 3, 8, 17}}, {{4, 1, 9, 5}, {1, 3, 5, 11}}, {{3, 7, 6}, {6, 2}}, {{5, 2, 3}, {5, 3, 4}}} {
		a, b := linRand(r, s[0]...), linRand(r, s[1]...)
		var want []float32
		withReference(func() {
			c := fastCall("MatMul", nil, 13, []string{"A", "B"}, nil, a, b)
			if err := matMulKernel(c); err != nil {
				t.Fatal(err)
			}
			want = c.Out[0].F32()
		})
		c := fastCall("MatMul", nil, 13, []string{"A", "B"}, nil, a, b)
		if err := matMulKernel(c); err != nil {
			t.Fatal(err)
		}
		closeF32(t, fmt.Sprint("MatMul ", s), c.Out[0].F32(), want, 1e-5)
	}
	for _, tA := range []int64{0, 1} {
		for _, tB := range []int64{0, 1} {
			m, k, n := 9, 13, 21
			as, bs := []int{m, k}, []int{k, n}
			if tA == 1 {
				as = []int{k, m}
			}
			if tB == 1 {
				bs = []int{n, k}
			}
			a, b, cc := linRand(r, as...), linRand(r, bs...), linRand(r, n)
			attrs := map[string]*loader.Attr{
				"transA": {Name: "transA", Kind: loader.AttrInt, I: tA}, "transB": {Name: "transB", Kind: loader.AttrInt, I: tB},
				"alpha": {Name: "alpha", Kind: loader.AttrFloat, F: 0.5}, "beta": {Name: "beta", Kind: loader.AttrFloat, F: 2},
			}
			var want []float32
			withReference(func() {
				c := fastCall("Gemm", attrs, 13, []string{"A", "B", "C"}, nil, a, b, cc)
				if err := gemmKernel(c); err != nil {
					t.Fatal(err)
				}
				want = c.Out[0].F32()
			})
			for rep := 0; rep < 2; rep++ {
				c := fastCall("Gemm", attrs, 13, []string{"A", "B", "C"}, map[string]bool{"B": true}, a, b, cc)
				if err := gemmKernel(c); err != nil {
					t.Fatal(err)
				}
				closeF32(t, fmt.Sprint("Gemm ", tA, tB), c.Out[0].F32(), want, 1e-5)
			}
		}
	}
}

func specialF32(r *rand.Rand, n int) []float32 {
	x := make([]float32, n)
	sp := []float32{0, float32(math.Copysign(0, -1)), float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1)), 6, -6}
	for i := range x {
		if r.Intn(50) == 0 {
			x[i] = sp[r.Intn(len(sp))]
		} else {
			x[i] = float32(r.NormFloat64() * 4)
		}
	}
	return x
}

func TestArithF32FastMatchesBinaryLoop(t *testing.T) {
	r := rand.New(rand.NewSource(14))
	pairs := [][2][]int{
		{{3, 5, 7}, {3, 5, 7}},
		{{2, 70000}, {2, 70000}}, // parallel
		{{3, 5, 7}, {}},
		{{1}, {4, 9}},
		{{2, 6, 5, 5}, {1, 6, 1, 1}},
		{{6, 1, 1}, {2, 6, 5, 5}},
		{{4, 300, 301}, {300, 1}},
		{{2, 3, 17}, {17}},
		{{17}, {2, 3, 17}},
		{{2, 3, 4, 5}, {3, 4, 1}},
		{{2, 3, 4, 5}, {3, 1, 5}}, // two blocks: general loop
		{{2, 1, 4}, {3, 1}},       // both broadcast: general loop
		{{8, 64, 112, 112}, {64, 1, 1}},
	}
	for _, pr := range pairs {
		a, b := tensor.New(tensor.Float32, pr[0]), tensor.New(tensor.Float32, pr[1])
		copy(a.F32(), specialF32(r, a.Size()))
		copy(b.F32(), specialF32(r, b.Size()))
		os, err := Broadcast(a.Shape, b.Shape)
		if err != nil {
			t.Fatal(err)
		}
		for _, op := range []opID{addT, subT, mulT, divT} {
			want, got := tensor.New(tensor.Float32, os), tensor.New(tensor.Float32, os)
			applyArith(op, want.F32(), os, a.F32(), a.Shape, b.F32(), b.Shape)
			if !arithF32Fast(op, got.F32(), os, a.F32(), a.Shape, b.F32(), b.Shape) {
				applyArith(op, got.F32(), os, a.F32(), a.Shape, b.F32(), b.Shape)
			}
			for i, w := range want.F32() {
				g := got.F32()[i]
				if math.Float32bits(g) != math.Float32bits(w) && !(g != g && w != w) {
					t.Fatalf("%v op %d %v: element %d = %g, want %g", pr[0], op, pr[1], i, g, w)
				}
			}
		}
	}
}

func TestUnaryF32FastMatchesScalar(t *testing.T) {
	r := rand.New(rand.NewSource(15))
	x := specialF32(r, 3*elemChunk+17)
	// tolerance 0, but 2 ulp for the kernels in float32 lanes (see activationSweep)
	check := func(name string, k func(dst, src []float32), ref func(float32) float32) {
		tol := uint32(0)
		if actFloat32Lanes(strings.ToUpper(name[:1]) + name[1:]) {
			tol = 2
		}
		got := make([]float32, len(x))
		f32Map(got, x, k)
		for i, v := range x {
			w, g := ref(v), got[i]
			if g != w && !(g != g && w != w) && ulpDiff(g, w) > tol {
				t.Fatalf("%s(%g) = %g, want %g", name, v, g, w)
			}
		}
	}
	check("relu", reluF32, func(v float32) float32 {
		if v < 0 {
			return 0
		}
		return v
	})
	check("clip", func(d, s []float32) { clipF32(d, s, -1.5, 6) }, func(v float32) float32 {
		if v < -1.5 {
			return -1.5
		}
		if v > 6 {
			return 6
		}
		return v
	})
	check("clip-inverted", func(d, s []float32) { clipF32(d, s, 2, 1) }, func(v float32) float32 {
		if v != v {
			return v
		}
		return 1
	})
	check("sigmoid", sigmoidF32, elemVia64(elemSigmoid))
	check("tanh", tanhF32, elemVia64(math.Tanh))
	check("erf", erfF32, elemVia64(math.Erf))
	alpha := float32(0.1)
	check("leakyrelu", func(d, s []float32) { leakyReluF32(d, s, alpha) }, elemVia64(func(x float64) float64 {
		if x < 0 {
			return float64(alpha) * x
		}
		return x
	}))
}

// The float32 MaxPool paths (separable 2-D, and the window-table one for
// other ranks) give exactly the generic per-window loop's values, NaN, ±0
// and ±Inf included, for strides, dilations, asymmetric pads and ceil mode.
func TestMaxPoolF32MatchesGeneric(t *testing.T) {
	r := rand.New(rand.NewSource(16))
	type pc struct {
		shape         []int
		k, s, d, pads []int64
		ceil          int64
	}
	cases := []pc{
		{[]int{3, 5, 13, 11}, []int64{3, 3}, []int64{2, 2}, []int64{1, 1}, []int64{1, 1, 1, 1}, 0},
		{[]int{2, 3, 12, 9}, []int64{2, 3}, []int64{1, 2}, []int64{2, 1}, []int64{0, 1, 1, 2}, 1},
		{[]int{1, 2, 7, 8}, []int64{3, 2}, []int64{3, 3}, []int64{1, 1}, []int64{2, 0, 2, 1}, 1},
		{[]int{2, 3, 17}, []int64{3}, []int64{2}, []int64{1}, []int64{1, 1}, 0},
		// 3×3 stride 2 pad 1 on rows wide enough for the vector kernels
		// (ResNet's stem pooling is this on 112×112)
		{[]int{2, 3, 9, 112}, []int64{3, 3}, []int64{2, 2}, []int64{1, 1}, []int64{1, 1, 1, 1}, 0},
		{[]int{1, 2, 6, 71}, []int64{3, 3}, []int64{2, 2}, []int64{1, 1}, []int64{1, 1, 1, 1}, 1},
		{[]int{1, 1, 5, 50}, []int64{3, 3}, []int64{2, 2}, []int64{1, 1}, []int64{1, 1, 0, 0}, 0},
	}
	for _, k := range cases {
		x := tensor.New(tensor.Float32, k.shape)
		copy(x.F32(), specialF32(r, x.Size()))
		attrs := map[string]*loader.Attr{"kernel_shape": linInts("kernel_shape", k.k...), "strides": linInts("strides", k.s...),
			"dilations": linInts("dilations", k.d...), "pads": linInts("pads", k.pads...),
			"ceil_mode": {Name: "ceil_mode", Kind: loader.AttrInt, I: k.ceil}}
		c := linTestCall("MaxPool", attrs, 12, x)
		if err := maxPoolKernel(c); err != nil {
			t.Fatal(err)
		}
		_, w, err := poolPrepare(c, x, true)
		if err != nil {
			t.Fatal(err)
		}
		want := make([]float32, c.Out[0].Size())
		poolMaxRun(want, nil, x.F32(), k.shape[0]*k.shape[1], w)
		for i, v := range want {
			got := c.Out[0].F32()[i]
			if math.Float32bits(got) != math.Float32bits(v) && !(got != got && v != v) {
				t.Fatalf("%+v: element %d = %g, want %g", k, i, got, v)
			}
		}
	}
}

// Softmax, LogSoftmax and Hardmax split across cores by outer rows give
// bit for bit the serial loop's values (the serial smLoop is the reference).
func TestSoftmaxRowsParallelMatchesSerial(t *testing.T) {
	r := rand.New(rand.NewSource(21))
	x := linRand(r, 96, 4, 700)
	for _, op := range []string{"Softmax", "LogSoftmax", "Hardmax"} {
		for _, axis := range []int64{1, 2} {
			attrs := map[string]*loader.Attr{"axis": {Name: "axis", Kind: loader.AttrInt, I: axis}}
			c := linTestCall(op, attrs, 13, x)
			k, _ := Lookup("", op, 13)
			if err := k(c); err != nil {
				t.Fatal(err)
			}
			outer, m, inner := 96, 4, 700
			if axis == 2 {
				outer, m, inner = 96*4, 700, 1
			}
			kind := map[string]smKind{"Softmax": smSoftmax, "LogSoftmax": smLogSoftmax, "Hardmax": smHardmax}[op]
			want := make([]float32, x.Size())
			smLoop(kind, want, x.F32(), outer, m, inner)
			for i, w := range want {
				if g := c.Out[0].F32()[i]; math.Float32bits(g) != math.Float32bits(w) {
					t.Fatalf("%s axis %d: element %d = %g, serial %g", op, axis, i, g, w)
				}
			}
		}
	}
}

// Kernels whose float32 output comes from an uninitialised pool buffer
// (tensor.NewUninit) write every element, and those that accumulate into
// their output (ConvTranspose) get a zeroed one: run on recycled buffers full
// of NaN, each gives exactly what it gives on a fresh zeroed buffer (the
// reference: the same kernel without a pool).
func TestUninitOutputsFullyWritten(t *testing.T) {
	r := rand.New(rand.NewSource(41))
	a, b, row := linRand(r, 4, 33, 65), linRand(r, 4, 33, 65), linRand(r, 65)
	cases := []struct {
		op string
		in []*tensor.Tensor
	}{
		{"Add", []*tensor.Tensor{a, b}}, {"Mul", []*tensor.Tensor{a, row}}, {"Div", []*tensor.Tensor{row, a}},
		{"Sub", []*tensor.Tensor{a, linRand(r, 4, 1, 65)}}, {"Erf", []*tensor.Tensor{a}}, {"Tanh", []*tensor.Tensor{a}},
		{"Softmax", []*tensor.Tensor{a}}, {"LogSoftmax", []*tensor.Tensor{a}}, {"Hardmax", []*tensor.Tensor{a}},
		{"MatMul", []*tensor.Tensor{a, linRand(r, 4, 65, 40)}}, {"MatMul", []*tensor.Tensor{a, linRand(r, 65, 70)}},
		{"MatMul", []*tensor.Tensor{linRand(r, 4, 33, 0), linRand(r, 4, 0, 65)}},
		{"Conv", []*tensor.Tensor{linRand(r, 2, 4, 32, 32), linRand(r, 3, 4, 3, 3)}},
		{"ConvTranspose", []*tensor.Tensor{linRand(r, 2, 4, 30, 30), linRand(r, 4, 3, 3, 3)}}, // adds into its output: must start from zeros
	}
	run := func(op string, in []*tensor.Tensor) []float32 {
		k, ok := Lookup("", op, 13)
		if !ok {
			t.Fatalf("no kernel for %s", op)
		}
		c := linTestCall(op, nil, 13, in...)
		if err := k(c); err != nil {
			t.Fatal(err)
		}
		return c.Out[0].F32()
	}
	for _, tc := range cases {
		want := append([]float32{}, run(tc.op, tc.in)...)
		pool := tensor.NewPool(1 << 30)
		testArena = &tensor.Arena{Pool: pool}
		for rep := 0; rep < 2; rep++ {
			g := testArena.NewUninit(tensor.Float32, []int{len(want)}) // a buffer the pool issued
			garbage := g.F32()
			for i := range garbage {
				garbage[i] = float32(math.NaN())
			}
			pool.Recycle([]*tensor.Tensor{g}, nil)
			got := run(tc.op, tc.in)
			if &got[0] != &garbage[0] {
				testArena = nil
				t.Fatalf("%s: the output did not reuse the recycled buffer", tc.op)
			}
			for i, w := range want {
				if math.Float32bits(got[i]) != math.Float32bits(w) {
					testArena = nil
					t.Fatalf("%s on a recycled buffer: element %d = %g, want %g", tc.op, i, got[i], w)
				}
			}
		}
		testArena = nil
	}
}

// The max-pooling vector kernels follow Go's max on the values where
// VMAXPS alone would not: NaN in either operand, +0 against −0.
func TestPoolVecGoMaxSemantics(t *testing.T) {
	r := rand.New(rand.NewSource(17))
	vals := []float32{0, float32(math.Copysign(0, -1)), float32(math.NaN()), 1, -1, float32(math.Inf(-1))}
	pick := func(n int) []float32 {
		x := make([]float32, n)
		for i := range x {
			x[i] = vals[r.Intn(len(vals))]
		}
		return x
	}
	same := func(got, want float32) bool {
		return math.Float32bits(got) == math.Float32bits(want) || (got != got && want != want)
	}
	for trial := 0; trial < 50; trial++ {
		a, b := pick(64+trial), pick(64+trial)
		got := make([]float32, len(a))
		n := maxRowsVec(got, a, b)
		if havePoolVec && n == 0 {
			t.Fatal("vector kernel did nothing")
		}
		for i := 0; i < n; i++ {
			if want := max(a[i], b[i]); !same(got[i], want) {
				t.Fatalf("max(%g, %g) = %g (bits %x), Go gives %g", a[i], b[i], got[i], math.Float32bits(got[i]), want)
			}
		}
		if !havePoolVec {
			continue
		}
		row := pick(2*48 + 1)
		y := make([]float32, 48)
		maxCols3s2Whole(y, row[1:]) // y[o] = max(row[2o], row[2o+1], row[2o+2])
		for o := range y {
			if want := max(max(row[2*o], row[2*o+1]), row[2*o+2]); !same(y[o], want) {
				t.Fatalf("3-wide window %d: %g, Go gives %g", o, y[o], want)
			}
		}
		maxCols2s2Whole(y, row) // y[o] = max(row[2o], row[2o+1])
		for o := range y {
			if want := max(row[2*o], row[2*o+1]); !same(y[o], want) {
				t.Fatalf("2-wide window %d: %g, Go gives %g", o, y[o], want)
			}
		}
	}
}
