package probe

import (
	"fmt"
	"math"
	"math/rand"
	"testing"

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
