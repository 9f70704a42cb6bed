package probe

import (
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

// The parallel, tiled copy moves the same elements as the definition of a
// permutation (out[i₀…] = in[i_perm…], computed index by index here) on
// shapes below and above the parallel threshold, with edges that are not
// multiples of the tile, and with broadcast (zero) source strides.
func TestShapeStridedParMatchesDefinition(t *testing.T) {
	rng := rand.New(rand.NewSource(1))
	cases := []struct {
		shape []int
		perm  []int
	}{
		{[]int{128, 32, 64}, []int{1, 2, 0}}, // attention keys, tiled and split
		{[]int{128, 32, 64}, []int{1, 0, 2}}, // row copies
		{[]int{37, 45}, []int{1, 0}},         // edges off the tile, serial
		{[]int{3, 300, 129}, []int{0, 2, 1}}, // tiled per outer index, split
		{[]int{2, 7, 5, 3}, []int{3, 1, 0, 2}},
		{[]int{1, 40, 1, 70}, []int{3, 2, 1, 0}},
		{[]int{17, 2049}, []int{1, 0}},
	}
	for _, tc := range cases {
		n := 1
		for _, d := range tc.shape {
			n *= d
		}
		src := make([]float32, n)
		for i := range src {
			src[i] = rng.Float32()
		}
		st := tensor.Strides(tc.shape)
		dims := make([]int, len(tc.perm))
		sStr := make([]int, len(tc.perm))
		for i, p := range tc.perm {
			dims[i], sStr[i] = tc.shape[p], st[p]
		}
		got := make([]float32, n)
		shapeStridedPar(got, 0, tensor.Strides(dims), src, 0, sStr, dims)
		idx := make([]int, len(dims))
		for o := 0; o < n; o++ {
			r := o
			for a := len(dims) - 1; a >= 0; a-- {
				idx[a] = r % dims[a]
				r /= dims[a]
			}
			s := 0
			for a, p := range tc.perm {
				s += idx[a] * st[p]
			}
			if got[o] != src[s] {
				t.Fatalf("shape %v perm %v: out[%d] = %v, want in[%d] = %v", tc.shape, tc.perm, o, got[o], s, src[s])
			}
		}
	}
	// broadcast: a [1, 300] row expanded to [400, 300] (split across cores)
	row := make([]float32, 300)
	for i := range row {
		row[i] = float32(i)
	}
	out := make([]float32, 400*300)
	shapeStridedPar(out, 0, []int{300, 1}, row, 0, []int{0, 1}, []int{400, 300})
	for i, v := range out {
		if v != float32(i%300) {
			t.Fatalf("expand: out[%d] = %v, want %v", i, v, float32(i%300))
		}
	}
}

// Gather's block copies split across the cores land where the serial loop
// puts them (block i at i·n).
func TestShapeBlocksParMatchesLoop(t *testing.T) {
	src := make([]float32, 1000*64)
	for i := range src {
		src[i] = float32(i)
	}
	for _, n := range []int{1, 64} {
		offs := make([]int, 3000)
		for i := range offs {
			offs[i] = (i * 7919 % 1000) * n
		}
		got := make([]float32, len(offs)*n)
		shapeBlocksPar(got, src, offs, n)
		for i, o := range offs {
			for j := 0; j < n; j++ {
				if got[i*n+j] != src[o+j] {
					t.Fatalf("n=%d: block %d element %d = %v, want %v", n, i, j, got[i*n+j], src[o+j])
				}
			}
		}
	}
}

func BenchmarkTransposeKeys(b *testing.B) {
	shape := []int{128, 32, 64}
	src := make([]float32, 128*32*64)
	dst := make([]float32, len(src))
	st := tensor.Strides(shape)
	dims := []int{32, 64, 128}
	sStr := []int{st[1], st[2], st[0]}
	b.SetBytes(int64(4 * len(src)))
	b.Run("serial", func(b *testing.B) {
		for b.Loop() {
			shapeStridedT(dst, 0, tensor.Strides(dims), src, 0, sStr, dims)
		}
	})
	b.Run("tiled", func(b *testing.B) {
		for b.Loop() {
			shapeStridedPar(dst, 0, tensor.Strides(dims), src, 0, sStr, dims)
		}
	})
}
