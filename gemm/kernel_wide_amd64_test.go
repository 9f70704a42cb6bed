package gemm

import (
	"fmt"
	"math"
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

// PackB packs a B of 256 or 1024 columns (the encoder's feed-forward
// weights) for the 6×64 kernel, which pads them less, and the products are
// bit for bit those of the 8×48 kernel: each C element is the same chain of
// multiply-adds over k in either tile (regression check of the summation
// order; shapes with k cut into kc slices, few rows for the prefetching
// variant, edge tiles in m and n, beta 0 over NaN).
func TestPackBWideSameBits(t *testing.T) {
	if !kernelAvailable("avx512") {
		t.Skip("no AVX-512 here")
	}
	restore, _ := setKernel("avx512")
	defer restore()
	r := rand.New(rand.NewPCG(11, 12))
	for _, s := range [][3]int{{1024, 256, 1024}, {100, 1024, 256}, {13, 256, 700}, {5, 120, 33}, {1, 64, 9}} {
		m, n, k := s[0], s[1], s[2]
		for _, tb := range bools {
			a, w := randSlice(r, m*k), randSlice(r, k*n)
			ldb := n
			if tb {
				ldb = k
			}
			pb := PackB(tb, k, n, w, ldb)
			if pb.kern != avx512WideKernel {
				t.Fatalf("n = %d: PackB chose %s, want avx512w", n, pb.kern.name)
			}
			narrow := packBFor(avx512Kernel, tb, k, n, w, ldb)
			got, want := make([]float32, m*n), make([]float32, m*n)
			for i := range got {
				got[i], want[i] = float32(math.NaN()), float32(math.NaN())
			}
			SgemmPackedB(false, m, 1, a, k, pb, 0, got, n)
			SgemmPackedB(false, m, 1, a, k, narrow, 0, want, n)
			for i := range got {
				if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
					t.Fatalf("%dx%dx%d transB %v: C[%d] = %v with 6×64, %v with 8×48", m, n, k, tb, i, got[i], want[i])
				}
			}
		}
	}
}

// Reading A in place (fnStridedA) gives bit for bit the products of packing
// it: the same multiply-add chain per C element (regression check of the
// summation order), over the encoder's shapes, k cut into kc slices, edge
// tiles in m and n, beta 0 over NaN and beta ≠ 0, both tile widths, with B
// packed per call (transposed), packed once (PackB) and read in place too
// (fnStridedAB: at most maxMDirect rows, attention's per-head shapes). The
// products' accuracy against the float64 reference is TestMixed's and
// TestWideKernel's.
func TestStridedASameBits(t *testing.T) {
	if !kernelAvailable("avx512") {
		t.Skip("no AVX-512 here")
	}
	r := rand.New(rand.NewPCG(13, 14))
	for _, kern := range []*kernel{avx512Kernel, avx512WideKernel} {
		for _, s := range [][3]int{{1024, 768, 256}, {100, 256, 1024}, {37, 120, 33}, {300, 50, 170}, {17, 64, 1}, {128, 64, 128}, {128, 128, 64}, {120, 100, 49}} {
			m, n, k := s[0], s[1], s[2]
			for _, mode := range []string{"packed", "transposed", "in place"} {
				tb := mode == "transposed"
				for _, beta := range []float32{0, -0.5} {
					a, w, c0 := randSlice(r, m*(k+3)), randSlice(r, k*n), randSlice(r, m*n)
					if beta == 0 {
						for i := range c0 {
							c0[i] = float32(math.NaN())
						}
					}
					ldb := n
					if tb {
						ldb = k
					}
					B := operand{data: w, ld: ldb, trans: tb}
					if mode == "packed" {
						B = packBFor(kern, false, k, n, w, n).operand()
					}
					A := operand{data: a, ld: k + 3}
					got := append([]float32(nil), c0...)
					multiply(1, kern, m, n, k, 1.5, A, B, beta, got, n)
					saved := kern.fnStridedA
					kern.fnStridedA = nil
					want := append([]float32(nil), c0...)
					multiply(1, kern, m, n, k, 1.5, A, B, beta, want, n)
					kern.fnStridedA = saved
					for i := range got {
						if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
							t.Fatalf("%s %v B %s beta %g: C[%d] = %v reading A in place, %v packed", kern.name, s, mode, beta, i, got[i], want[i])
						}
					}
				}
			}
		}
	}
}
