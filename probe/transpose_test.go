package probe

import (
	"fmt"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Transpose moves values: the output at every index is the input at the
// permuted index (the ONNX Transpose definition, evaluated index by index
// here), for float32 shapes whose transposed planes have full 16×16 tiles
// and edges (the vector tile path) and for the perms of attention exports
// ([S, B·H, d] → [B·H, d, S] for the keys, [1, 0, 2] for the others).
func TestTransposeTilesMatchDefinition(t *testing.T) {
	r := rand.New(rand.NewSource(9))
	for _, tc := range []struct {
		shape []int
		perm  []int64
	}{
		{[]int{128, 8, 64}, []int64{1, 2, 0}},
		{[]int{37, 5, 50}, []int64{1, 2, 0}},
		{[]int{16, 16}, []int64{1, 0}},
		{[]int{33, 47}, []int64{1, 0}},
		{[]int{3, 40, 24}, []int64{0, 2, 1}},
		{[]int{2, 17, 3, 32}, []int64{0, 3, 2, 1}},
		{[]int{64, 4, 48}, []int64{1, 0, 2}},
	} {
		for _, vec := range []bool{true, false} {
			saved := haveTranspose16
			haveTranspose16 = haveTranspose16 && vec
			x := linRand(r, tc.shape...)
			c := fastCall("Transpose", map[string]*loader.Attr{"perm": linInts("perm", tc.perm...)}, 13, []string{"X"}, nil, x)
			err := transposeKernel(c)
			haveTranspose16 = saved
			if err != nil {
				t.Fatal(err)
			}
			y := c.Out[0]
			xs := tensor.Strides(x.Shape)
			idx := make([]int, y.Rank())
			for k, v := range y.F32() {
				rem := k
				for a := y.Rank() - 1; a >= 0; a-- {
					idx[a] = rem % y.Shape[a]
					rem /= y.Shape[a]
				}
				src := 0
				for a, p := range tc.perm {
					src += idx[a] * xs[p]
				}
				if v != x.F32()[src] {
					t.Fatalf("%v perm %v (vector %v): y%v = %g, want x[%d] = %g", tc.shape, tc.perm, vec, fmt.Sprint(idx), v, src, x.F32()[src])
				}
			}
		}
	}
}

// BenchmarkTransposeAttention times the Transposes of an exported attention
// block at the encoder benchmark's batch of 16 (4 heads of 64, 128 tokens):
// keys [B·H, S, d] → [B·H, d, S], and from sequence-first [S, B·H, d] to
// [B·H, d, S] and [B·H, S, d]; outputs recycled as in a run.
func BenchmarkTransposeAttention(b *testing.B) {
	r := rand.New(rand.NewSource(1))
	for _, tc := range []struct {
		name  string
		shape []int
		perm  []int64
	}{{"bhsd_swap", []int{64, 128, 64}, []int64{0, 2, 1}}, {"sbd_120", []int{128, 64, 64}, []int64{1, 2, 0}}, {"sbd_102", []int{128, 64, 64}, []int64{1, 0, 2}}} {
		b.Run(tc.name, func(b *testing.B) {
			x := linRand(r, tc.shape...)
			attrs := map[string]*loader.Attr{"perm": linInts("perm", tc.perm...)}
			pool := tensor.NewPool(1 << 30)
			testArena = &tensor.Arena{Pool: pool}
			defer func() { testArena = nil }()
			b.SetBytes(int64(4 * x.Size()))
			for b.Loop() {
				c := fastCall("Transpose", attrs, 13, []string{"X"}, nil, x)
				if err := transposeKernel(c); err != nil {
					b.Fatal(err)
				}
				pool.Recycle([]*tensor.Tensor{c.Out[0]}, nil)
			}
		})
	}
}
