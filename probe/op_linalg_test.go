package probe

import (
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// testArena is the arena of the kernel calls the tests build (linTestCall,
// fastCall): a test that wants pooled outputs sets it and resets it to nil.
var testArena *tensor.Arena

func linTestCall(op string, attrs map[string]*loader.Attr, opset int, in ...*tensor.Tensor) *Call {
	if attrs == nil {
		attrs = map[string]*loader.Attr{}
	}
	return &Call{
		Node:  &loader.Node{OpType: op, Attrs: attrs, Outputs: []string{"y"}},
		In:    in,
		Out:   make([]*tensor.Tensor, 1),
		Opset: opset,
		run:   &runState{arena: testArena},
	}
}

func linInts(name string, v ...int64) *loader.Attr {
	return &loader.Attr{Name: name, Kind: loader.AttrInts, Ints: v}
}

func linRand(r *rand.Rand, shape ...int) *tensor.Tensor {
	t := tensor.New(tensor.Float32, shape)
	for i := range t.F32() {
		t.F32()[i] = float32(r.NormFloat64())
	}
	return t
}

// naiveConv2D is the textbook definition, for checking the im2col path.
func naiveConv2D(x, w *tensor.Tensor, group, sh, sw, dh, dw, pt, pl, oh, ow int) []float32 {
	N, C, H, W := x.Shape[0], x.Shape[1], x.Shape[2], x.Shape[3]
	M, KH, KW := w.Shape[0], w.Shape[2], w.Shape[3]
	Cg, Mg := C/group, M/group
	out := make([]float32, N*M*oh*ow)
	for n := 0; n < N; n++ {
		for m := 0; m < M; m++ {
			g := m / Mg
			for i := 0; i < oh; i++ {
				for j := 0; j < ow; j++ {
					var s float64
					for c := 0; c < Cg; c++ {
						for a := 0; a < KH; a++ {
							for b := 0; b < KW; b++ {
								y, xx := i*sh-pt+a*dh, j*sw-pl+b*dw
								if y < 0 || y >= H || xx < 0 || xx >= W {
									continue
								}
								s += float64(x.F32()[((n*C+g*Cg+c)*H+y)*W+xx]) * float64(w.F32()[((m*Cg+c)*KH+a)*KW+b])
							}
						}
					}
					out[((n*M+m)*oh+i)*ow+j] = float32(s)
				}
			}
		}
	}
	return out
}

func TestConvMatchesNaive(t *testing.T) {
	r := rand.New(rand.NewSource(1))
	for trial := 0; trial < 30; trial++ {
		group := []int{1, 2, 4}[r.Intn(3)]
		C, M := group*(1+r.Intn(3)), group*(1+r.Intn(3))
		H, W := 3+r.Intn(8), 3+r.Intn(8)
		KH, KW := 1+r.Intn(3), 1+r.Intn(3)
		sh, sw, dh, dw := 1+r.Intn(2), 1+r.Intn(3), 1+r.Intn(2), 1+r.Intn(2)
		pt, pl, pb, pr := r.Intn(2), r.Intn(3), r.Intn(2), r.Intn(2)
		oh := (H+pt+pb-((KH-1)*dh+1))/sh + 1
		ow := (W+pl+pr-((KW-1)*dw+1))/sw + 1
		if oh < 1 || ow < 1 {
			continue
		}
		x, w := linRand(r, 2, C, H, W), linRand(r, M, C/group, KH, KW)
		c := linTestCall("Conv", map[string]*loader.Attr{
			"group":     {Name: "group", Kind: loader.AttrInt, I: int64(group)},
			"strides":   linInts("strides", int64(sh), int64(sw)),
			"dilations": linInts("dilations", int64(dh), int64(dw)),
			"pads":      linInts("pads", int64(pt), int64(pl), int64(pb), int64(pr)),
		}, 11, x, w)
		if err := convKernel(c); err != nil {
			t.Fatal(err)
		}
		want := naiveConv2D(x, w, group, sh, sw, dh, dw, pt, pl, oh, ow)
		got := c.Out[0]
		if !tensor.SameShape(got.Shape, []int{2, M, oh, ow}) {
			t.Fatalf("trial %d: shape %v, want %v", trial, got.Shape, []int{2, M, oh, ow})
		}
		for i, v := range want {
			if math.Abs(float64(got.F32()[i]-v)) > 1e-4*(1+math.Abs(float64(v))) {
				t.Fatalf("trial %d: element %d = %g, want %g", trial, i, got.F32()[i], v)
			}
		}
	}
}

func TestEinsumMatchesMatMul(t *testing.T) {
	r := rand.New(rand.NewSource(2))
	a, b := linRand(r, 2, 3, 4, 5), linRand(r, 2, 3, 6, 5)
	c := linTestCall("Einsum", map[string]*loader.Attr{"equation": {Name: "equation", Kind: loader.AttrString, S: "bhqd,bhkd->bhqk"}}, 12, a, b)
	if err := einsumKernel(c); err != nil {
		t.Fatal(err)
	}
	got := c.Out[0]
	if !tensor.SameShape(got.Shape, []int{2, 3, 4, 6}) {
		t.Fatalf("shape %v", got.Shape)
	}
	for bh := 0; bh < 6; bh++ {
		for q := 0; q < 4; q++ {
			for k := 0; k < 6; k++ {
				var s float32
				for d := 0; d < 5; d++ {
					s += a.F32()[(bh*4+q)*5+d] * b.F32()[(bh*6+k)*5+d]
				}
				if g := got.F32()[(bh*4+q)*6+k]; math.Abs(float64(g-s)) > 1e-4 {
					t.Fatalf("[%d,%d,%d] = %g, want %g", bh, q, k, g, s)
				}
			}
		}
	}
}

// BenchmarkConvResNet18 runs the convolution shapes of ResNet-18 at 224×224
// over a batch of 8 with constant weights and bias (as in a model), output
// buffers recycled through a tensor.Pool as vitals check does, and reports
// GFLOP/s (2 per multiply-add).
func BenchmarkConvResNet18(b *testing.B) {
	r := rand.New(rand.NewSource(3))
	pool := tensor.NewPool(1 << 30)
	testArena = &tensor.Arena{Pool: pool}
	defer func() { testArena = nil }()
	for _, s := range []struct {
		name              string
		C, M, H, k, s, pd int
	}{
		{"conv1_7x7s2", 3, 64, 224, 7, 2, 3},
		{"layer1_3x3", 64, 64, 56, 3, 1, 1},
		{"layer2_3x3s2", 64, 128, 56, 3, 2, 1},
		{"layer2_3x3", 128, 128, 28, 3, 1, 1},
		{"layer3_3x3", 256, 256, 14, 3, 1, 1},
		{"layer4_3x3", 512, 512, 7, 3, 1, 1},
		{"layer4_1x1s2", 256, 512, 14, 1, 2, 0},
	} {
		b.Run(s.name, func(b *testing.B) {
			const n = 8
			x, w, bias := linRand(r, n, s.C, s.H, s.H), linRand(r, s.M, s.C, s.k, s.k), linRand(r, s.M)
			attrs := map[string]*loader.Attr{"pads": linInts("pads", int64(s.pd), int64(s.pd), int64(s.pd), int64(s.pd)),
				"strides": linInts("strides", int64(s.s), int64(s.s))}
			c := fastCall("Conv", attrs, 11, []string{"X", "W", "B"}, map[string]bool{"W": true, "B": true}, x, w, bias)
			if err := convKernel(c); err != nil { // packs the weights
				b.Fatal(err)
			}
			oh := (s.H+2*s.pd-s.k)/s.s + 1
			flops := 2 * float64(n*s.M*oh*oh) * float64(s.C*s.k*s.k)
			b.ResetTimer()
			for b.Loop() {
				pool.Recycle([]*tensor.Tensor{c.Out[0]}, []*tensor.Tensor{x})
				if err := convKernel(c); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(flops*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
		})
	}
}

// TestConvChunked covers an image large enough for the im2col buffer to be built in blocks.
func TestConvChunked(t *testing.T) {
	r := rand.New(rand.NewSource(4))
	x, w := linRand(r, 1, 32, 100, 100), linRand(r, 4, 32, 3, 3)
	if 32*9*100*100 <= convColBudget {
		t.Fatal("image too small to exercise blocking")
	}
	c := linTestCall("Conv", map[string]*loader.Attr{"pads": linInts("pads", 1, 0, 1, 2), "strides": linInts("strides", 1, 1)}, 11, x, w)
	if err := convKernel(c); err != nil {
		t.Fatal(err)
	}
	want := naiveConv2D(x, w, 1, 1, 1, 1, 1, 1, 0, 100, 100)
	for i, v := range want {
		if g := c.Out[0].F32()[i]; math.Abs(float64(g-v)) > 1e-3*(1+math.Abs(float64(v))) {
			t.Fatalf("element %d = %g, want %g", i, g, v)
		}
	}
}

// TestEinsumFastPath compares the GEMM path (float32) with the general loop
// (int64 inputs never take the GEMM path) on integer-valued data.
func TestEinsumFastPath(t *testing.T) {
	r := rand.New(rand.NewSource(5))
	cases := []struct {
		eq     string
		shapes [][]int
	}{
		{"ij,jk->ki", [][]int{{3, 4}, {4, 5}}},
		{"bij,bjk->bik", [][]int{{2, 3, 4}, {2, 4, 5}}},
		{"ab,ab->", [][]int{{3, 4}, {3, 4}}},
		{"i,j->ij", [][]int{{3}, {4}}},
		{"abc,cd->dba", [][]int{{2, 3, 4}, {4, 5}}},
		{"...ij,...jk", [][]int{{2, 3, 4}, {2, 4, 2}}},
		{"ii,ij->j", [][]int{{3, 3}, {3, 2}}},
	}
	for _, tc := range cases {
		var f32s, i64s []*tensor.Tensor
		for _, s := range tc.shapes {
			ft := tensor.New(tensor.Float32, s)
			it := tensor.New(tensor.Int64, s)
			for i := range ft.F32() {
				v := r.Intn(7) - 3
				ft.F32()[i], it.I64()[i] = float32(v), int64(v)
			}
			f32s, i64s = append(f32s, ft), append(i64s, it)
		}
		attrs := map[string]*loader.Attr{"equation": {Name: "equation", Kind: loader.AttrString, S: tc.eq}}
		cf, ci := linTestCall("Einsum", attrs, 12, f32s...), linTestCall("Einsum", attrs, 12, i64s...)
		if err := einsumKernel(cf); err != nil {
			t.Fatalf("%s: %v", tc.eq, err)
		}
		if err := einsumKernel(ci); err != nil {
			t.Fatalf("%s: %v", tc.eq, err)
		}
		if !tensor.SameShape(cf.Out[0].Shape, ci.Out[0].Shape) {
			t.Fatalf("%s: shapes %v and %v", tc.eq, cf.Out[0].Shape, ci.Out[0].Shape)
		}
		for i, v := range ci.Out[0].I64() {
			if float32(v) != cf.Out[0].F32()[i] {
				t.Fatalf("%s: element %d: %g, want %d", tc.eq, i, cf.Out[0].F32()[i], v)
			}
		}
	}
}
