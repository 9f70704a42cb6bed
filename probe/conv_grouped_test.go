package probe

import (
	"fmt"
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Grouped convolutions through convGrouped (row table over padded planes)
// against the reference convolution (im2col + linGemmT) and the implicit
// GEMM it bypasses, tolerance 1e-4 relative as the neighbouring conv tests
// (float32 sums of up to 16·9 products in another order, bias added after
// the sum): group widths 2, 8 and 16, 3×3 with strides 1 and 2, 5×5 with
// dilation 2, asymmetric pads, planes from 7×7 to 30×29, ungrouped ones
// with at most convRowTableMaxM output channels, with and without
// bias, constant weights (packed), outputs recycled full of NaN.
func TestConvGroupedMatchesReference(t *testing.T) {
	r := rand.New(rand.NewSource(33))
	pool := tensor.NewPool(1 << 30)
	testArena = &tensor.Arena{Pool: pool}
	defer func() { testArena = nil }()
	type tc struct{ N, C, M, group, H, W, K, s, d, pt, pl, pb, pr int }
	for i, k := range []tc{
		{2, 32, 32, 2, 14, 14, 3, 1, 1, 1, 1, 1, 1},
		{3, 48, 48, 3, 7, 7, 3, 1, 1, 1, 1, 1, 1},
		{2, 16, 32, 8, 30, 29, 3, 2, 1, 1, 1, 1, 1},
		{1, 24, 24, 3, 13, 17, 5, 1, 2, 4, 3, 2, 4},
		{2, 64, 64, 4, 28, 28, 3, 2, 1, 0, 1, 1, 0},
		{1, 16, 16, 2, 15, 13, 3, 2, 1, 0, 0, 1, 1}, // stride 2, no left pad, odd width (padPairs)
		{1, 16, 16, 2, 16, 17, 5, 2, 1, 2, 3, 0, 0}, // stride 2, left pad 3
		{2, 24, 32, 1, 16, 15, 3, 1, 1, 1, 1, 1, 1}, // ungrouped, 32 output channels (DenseNet-like)
		{1, 40, 64, 1, 28, 28, 3, 2, 1, 1, 1, 1, 1}, // ungrouped, 64 channels, stride 2
	} {
		x, w, b := linRand(r, k.N, k.C, k.H, k.W), linRand(r, k.M, k.C/k.group, k.K, k.K), linRand(r, k.M)
		attrs := map[string]*loader.Attr{
			"group":     {Name: "group", Kind: loader.AttrInt, I: int64(k.group)},
			"strides":   linInts("strides", int64(k.s), int64(k.s)),
			"dilations": linInts("dilations", int64(k.d), int64(k.d)),
			"pads":      linInts("pads", int64(k.pt), int64(k.pl), int64(k.pb), int64(k.pr)),
		}
		for _, in := range [][]*tensor.Tensor{{x, w}, {x, w, b}} {
			run := func() []float32 {
				c := fastCall("Conv", attrs, 11, []string{"X", "W", "B"}[:len(in)], map[string]bool{"W": true, "B": true}, in...)
				if err := convKernel(c); err != nil {
					t.Fatal(err)
				}
				return c.Out[0].F32()
			}
			what := fmt.Sprintf("case %d %+v inputs %d", i, k, len(in))
			var want, implicit []float32
			withReference(func() { want = append([]float32(nil), run()...) })
			convGroupedOn = false
			implicit = append([]float32(nil), run()...)
			convGroupedOn = true
			closeF32(t, what+" implicit vs reference", implicit, want, 1e-4)
			for rep := 0; rep < 2; rep++ {
				got := run()
				closeF32(t, what+" vs reference", got, want, 1e-4)
				closeF32(t, what+" vs implicit GEMM", got, implicit, 1e-4)
				for j := range got {
					got[j] = float32(math.NaN())
				}
				pool.Recycle([]*tensor.Tensor{tensor.From(got, len(got))}, nil)
			}
		}
	}
}
