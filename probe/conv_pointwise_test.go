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

// Batched pointwise convolutions (convPointwise) against the per-image
// products (convDirect, bit for bit: each output is the same dot product in
// the same order) and the reference convolution (im2col + linGemmT,
// tolerance 1e-4 relative as the file's neighbours), with constant weights
// (packed), with and without bias, groups 1 and 2, on planes 1×1, 7×7,
// 13×13 and 14×14 (cut across 48-wide tiles), output buffers recycled full
// of garbage.
func TestConvPointwiseMatchesDirect(t *testing.T) {
	r := rand.New(rand.NewSource(31))
	pool := tensor.NewPool(1 << 30)
	testArena = &tensor.Arena{Pool: pool}
	defer func() { testArena = nil }()
	type tc struct{ N, C, M, group, H, W int }
	for i, k := range []tc{{8, 40, 10, 1, 1, 1}, {8, 24, 144, 1, 7, 7}, {3, 16, 20, 2, 13, 13}, {8, 112, 672, 1, 14, 14}, {2, 9, 17, 1, 5, 3}} {
		x, w, b := linRand(r, k.N, k.C, k.H, k.W), linRand(r, k.M, k.C/k.group, 1, 1), linRand(r, k.M)
		attrs := map[string]*loader.Attr{"group": {Name: "group", Kind: loader.AttrInt, I: int64(k.group)}}
		for _, in := range [][]*tensor.Tensor{{x, w}, {x, w, b}} {
			run := func() []float32 {
				c := fastCall("Conv", attrs, 11, []string{"X", "W", "B"}[:len(in)], map[string]bool{"W": true, "B": true}, in...)
				if err := convKernel(c); err != nil {
					t.Fatal(err)
				}
				return c.Out[0].F32()
			}
			what := fmt.Sprintf("case %d %+v inputs %d", i, k, len(in))
			var want, direct []float32
			withReference(func() { want = append([]float32(nil), run()...) })
			convPointwiseOn = false
			direct = append([]float32(nil), run()...)
			convPointwiseOn = true
			for rep := 0; rep < 2; rep++ {
				got := run()
				closeF32(t, what+" vs reference", got, want, 1e-4)
				for j, v := range direct {
					if math.Float32bits(got[j]) != math.Float32bits(v) {
						t.Fatalf("%s: element %d = %g, per-image product %g", what, j, got[j], v)
					}
				}
				for j := range got {
					got[j] = float32(math.NaN())
				}
				pool.Recycle([]*tensor.Tensor{tensor.From(got, len(got))}, nil)
			}
		}
	}
}

// 1×1 convolutions with a fused activation on planes large enough for the
// per-image products (convDirect: 40×40 = 1600 pixels) and small enough for
// the batched product (convPointwise: 7×7): the hook sees the values of the
// unfused run bit for bit (the same plan with its fusion links removed),
// SiLU in both operand orders and HardSwish, with and without bias; and a
// grouped 3×3 convolution (convGrouped) with SiLU.
func TestFusionPointwiseSeesUnfusedValues(t *testing.T) {
	r := rand.New(rand.NewSource(42))
	b := modelbuild.New("pw", 14)
	b.Input("x", []int{3, 8, 40, 40}, true)
	init := randInit(b, r)
	b.Node("Conv", "c0", []string{"x", init("w0", 96, 8, 1, 1), init("b0", 96)}, []string{"y0"})
	b.Node("Sigmoid", "s0", []string{"y0"}, []string{"g0"})
	b.Node("Mul", "m0", []string{"y0", "g0"}, []string{"a0"})
	b.Node("Conv", "c1", []string{"a0", init("w1", 100, 96, 1, 1)}, []string{"y1"})
	b.Node("Sigmoid", "s1", []string{"y1"}, []string{"g1"})
	b.Node("Mul", "m1", []string{"g1", "y1"}, []string{"a1"})
	b.Node("Conv", "c2", []string{"a1", init("w2", 90, 100, 1, 1), init("b2", 90)}, []string{"y2"})
	b.Node("HardSwish", "hs", []string{"y2"}, []string{"a2"})
	b.Node("MaxPool", "pool", []string{"a2"}, []string{"p2"},
		modelbuild.Attr{Name: "kernel_shape", Value: []int64{6, 6}}, modelbuild.Attr{Name: "strides", Value: []int64{6, 6}})
	b.Node("Conv", "c3", []string{"p2", init("w3", 64, 90, 1, 1), init("b3", 64)}, []string{"y3"})
	b.Node("Sigmoid", "s3", []string{"y3"}, []string{"g3"})
	b.Node("Mul", "m3", []string{"y3", "g3"}, []string{"a3"})
	// grouped 3×3 (convGrouped, the row-table GEMM) → SiLU
	b.Node("Conv", "c4", []string{"a3", init("w4", 64, 16, 3, 3), init("b4", 64)}, []string{"y4"},
		modelbuild.Attr{Name: "group", Value: 4}, modelbuild.Attr{Name: "pads", Value: []int64{1, 1, 1, 1}})
	b.Node("Sigmoid", "s4", []string{"y4"}, []string{"g4"})
	b.Node("Mul", "m4", []string{"y4", "g4"}, []string{"out"})
	b.Output("out")
	var batches []*tensor.Tensor
	for i := 0; i < 2; i++ {
		x := linRand(r, 3, 8, 40, 40)
		for j := range x.F32() {
			x.F32()[j] *= 8
		}
		x.F32()[5] = float32(math.NaN())
		batches = append(batches, x)
	}
	fusionSameBits(t, b, 5, batches)
}
