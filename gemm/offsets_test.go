package gemm

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// TestSgemmPackedAOffsets checks C = A·B, B[p][j] = b[offs[p] + j], against
// a float64 triple loop (the forward error bound of gemm_test.go) on every
// kernel: overlapping and unordered rows (as a convolution's taps), n around
// NR = 48 (a partial last tile is packed), m around MR = 8 and mc, k over
// one kc slice (384). C's padding between rows must stay untouched.
func TestSgemmPackedAOffsets(t *testing.T) {
	forEachKernel(t, func(t *testing.T) {
		r := rand.New(rand.NewPCG(31, 32))
		for _, s := range [][3]int{{16, 840, 144}, {8, 48, 9}, {13, 47, 25}, {100, 100, 500}, {16, 1, 144}, {5, 97, 0}} {
			m, n, k := s[0], s[1], s[2]
			name := fmt.Sprintf("m=%d,n=%d,k=%d", m, n, k)
			b := randSlice(r, n+3*k+50)
			offs := make([]int, k)
			for p := range offs {
				offs[p] = r.IntN(len(b) - n + 1)
			}
			a := randSlice(r, m*k)
			pa := PackA(false, m, k, a, max(k, 1))
			ldc := n + 3
			c := nanSlice(m * ldc)
			SgemmPackedAOffsets(n, pa, b, offs, c, ldc)
			for i := 0; i < m; i++ {
				for j := 0; j < ldc; j++ {
					g := c[i*ldc+j]
					if j >= n {
						if !math.IsNaN(float64(g)) {
							t.Fatalf("%s: padding C[%d,%d] written", name, i, j)
						}
						continue
					}
					want, bound := 0.0, 0.0
					for p := 0; p < k; p++ {
						v := float64(a[i*k+p]) * float64(b[offs[p]+j])
						want += v
						bound += math.Abs(v)
					}
					if math.Abs(float64(g)-want) > 2*float64(k+2)*unitRoundoff*bound+1e-30 {
						t.Fatalf("%s: C[%d,%d] = %g, want %g", name, i, j, g, want)
					}
				}
			}
		}
	})
}
