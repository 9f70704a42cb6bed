package gemm

import (
	"fmt"
	"math/rand/v2"
	"testing"
)

// The 6×64 kernel, forced for every product (packed and strided B, edge
// tiles in m and n, k across kc slices, beta 0 over NaN and beta ≠ 0),
// matches the float64 reference within the usual error bound.
func TestWideKernel(t *testing.T) {
	if !kernelAvailable("avx512") {
		t.Skip("no AVX-512 here")
	}
	r := rand.New(rand.NewPCG(9, 10))
	shapes := [][3]int{
		{128, 64, 128}, {128, 128, 64}, {49, 49, 32}, {49, 32, 49}, {7, 64, 5},
		{6, 64, 1}, {13, 130, 400}, {200, 65, 17}, {1, 1, 1}, {130, 3100, 9},
	}
	for _, s := range shapes {
		for _, ta := range bools {
			for _, tb := range bools {
				for _, be := range []float32{0, 1, -0.5} {
					tc := gemmCase{ta, tb, s[0], s[1], s[2], 1.5, be, 2}
					a, b, c0 := tc.operands(r)
					got := append([]float32(nil), c0.data...)
					multiply(1+len(got)%2, avx512WideKernel, tc.m, tc.n, tc.k, tc.alpha,
						operand{data: a.data, ld: a.ld, trans: ta}, operand{data: b.data, ld: b.ld, trans: tb},
						tc.beta, got, c0.ld)
					tc.check(t, a, b, c0, got)
				}
			}
		}
	}
}

// Sgemm takes the 6×64 kernel where it pads less (n = 64, 128, 49) and
// keeps the 8×48 one elsewhere (n = 48, 96, 768, 32).
func TestWiderFor(t *testing.T) {
	for n, wide := range map[int]bool{64: true, 128: true, 49: true, 256: true, 48: false, 96: false, 768: false, 32: false} {
		if got := widerFor(avx512Kernel, n) == avx512WideKernel; got != wide {
			t.Errorf("n = %d: wide kernel %v, want %v", n, got, wide)
		}
	}
	if widerFor(avx2Kernel, 64) != avx2Kernel {
		t.Error("the AVX2 kernel must not be replaced")
	}
}

func kernelAvailable(name string) bool {
	for _, k := range kernels {
		if k.name == name {
			return true
		}
	}
	return false
}

// BenchmarkWideKernel: attention-sized products on one core with the 8×48
// and the 6×64 kernel (B read in place, beta 0).
func BenchmarkWideKernel(b *testing.B) {
	if !kernelAvailable("avx512") {
		b.Skip("no AVX-512 here")
	}
	for _, s := range [][3]int{{128, 64, 128}, {128, 128, 64}, {49, 49, 32}, {49, 32, 49}} {
		m, n, k := s[0], s[1], s[2]
		x, y, c := make([]float32, m*k), make([]float32, k*n), make([]float32, m*n)
		for i := range x {
			x[i] = float32(i%7) - 3
		}
		for i := range y {
			y[i] = float32(i%5) - 2
		}
		for _, kern := range []*kernel{avx512Kernel, avx512WideKernel} {
			b.Run(fmt.Sprintf("%dx%dx%d/%s", m, n, k, kern.name), func(b *testing.B) {
				for b.Loop() {
					multiply(1, kern, m, n, k, 1, operand{data: x, ld: k}, operand{data: y, ld: n}, 0, c, n)
				}
				b.ReportMetric(2*float64(m*n*k)*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
			})
		}
	}
}
