package gemm

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// TestSgemmPackedAImages checks the batched product against a float64
// triple loop per image (the forward error bound of the file's other tests)
// and against the per-image products SgemmPackedA / SgemmPackedABias, bit
// for bit (each element is the same k-ordered dot product), over plane
// sizes that cut NR-wide tiles across images (1, 7, 49, 196 with NR = 48),
// row counts around MR and maxMDirect, k over one slice (kc = 384), padded
// row and image strides (NaN in the gaps, which must stay untouched).
func TestSgemmPackedAImages(t *testing.T) {
	forEachKernel(t, func(t *testing.T) {
		r := rand.New(rand.NewPCG(21, 22))
		for _, s := range [][4]int{ // imgs, P, m, k
			{8, 1, 40, 16}, {8, 49, 24, 40}, {3, 7, 9, 5}, {8, 196, 144, 96},
			{2, 49, 200, 500}, {5, 50, 8, 1000}, {1, 3136, 16, 24}, {4, 13, 17, 0},
		} {
			imgs, P, m, k := s[0], s[1], s[2], s[3]
			ldb, ldc := P+1, P+2
			bStride, cStride := k*ldb+3, m*ldc+5
			a := randSlice(r, m*k)
			bias := randSlice(r, m)
			b := nanSlice(imgs * bStride)
			for i := 0; i < imgs; i++ {
				for p := 0; p < k; p++ {
					for j := 0; j < P; j++ {
						b[i*bStride+p*ldb+j] = r.Float32()*2 - 1
					}
				}
			}
			pa := PackA(false, m, k, a, max(k, 1))
			for _, mode := range []string{"bias", "beta0", "beta1"} {
				name := fmt.Sprintf("imgs=%d,P=%d,m=%d,k=%d,%s", imgs, P, m, k, mode)
				c0 := nanSlice(imgs * cStride)
				for i := 0; i < imgs; i++ {
					for q := 0; q < m; q++ {
						for j := 0; j < P; j++ {
							v := float32(math.NaN()) // beta = 0 must not read C
							if mode == "beta1" || mode == "bias" {
								v = r.Float32()*2 - 1
							}
							c0[i*cStride+q*ldc+j] = v
						}
					}
				}
				var bs []float32
				beta := float32(0)
				switch mode {
				case "bias":
					bs = bias
				case "beta1":
					beta = 1
				}
				got := append([]float32(nil), c0...)
				SgemmPackedAImages(imgs, P, pa, b, ldb, bStride, bs, beta, got, ldc, cStride)
				per := append([]float32(nil), c0...)
				for i := 0; i < imgs; i++ {
					if bs != nil {
						SgemmPackedABias(P, pa, false, b[i*bStride:], ldb, bs, per[i*cStride:], ldc)
					} else {
						SgemmPackedA(P, 1, pa, false, b[i*bStride:], ldb, beta, per[i*cStride:], ldc)
					}
				}
				for o := range got {
					g := got[o]
					i, rest := o/cStride, o%cStride
					q, j := rest/ldc, rest%ldc
					if q >= m || j >= P {
						if !math.IsNaN(float64(g)) {
							t.Fatalf("%s: gap at %d written (%g)", name, o, g)
						}
						continue
					}
					want, bound := 0.0, 0.0
					switch mode {
					case "bias":
						want, bound = float64(bias[q]), math.Abs(float64(bias[q]))
					case "beta1":
						want, bound = float64(c0[o]), math.Abs(float64(c0[o]))
					}
					for p := 0; p < k; p++ {
						v := float64(a[q*k+p]) * float64(b[i*bStride+p*ldb+j])
						want += v
						bound += math.Abs(v)
					}
					if math.Abs(float64(g)-want) > 2*float64(k+2)*unitRoundoff*bound+1e-30 {
						t.Fatalf("%s: image %d C[%d,%d] = %g, want %g", name, i, q, j, g, want)
					}
					if math.Float32bits(g) != math.Float32bits(per[o]) {
						t.Fatalf("%s: image %d C[%d,%d] = %g, per-image product %g", name, i, q, j, g, per[o])
					}
				}
			}
		}
	})
}

func nanSlice(n int) []float32 {
	s := make([]float32, n)
	for i := range s {
		s[i] = float32(math.NaN())
	}
	return s
}
