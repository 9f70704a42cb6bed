package gemm

import (
	"fmt"
	"math/rand/v2"
	"testing"
)

// Benchmark shapes. Square sizes, plus the im2col GEMMs of ResNet-18 at
// batch 8 and 224×224 input, computed as C = W·cols with W (m×k) the
// convolution weights (out channels × in channels·kh·kw) and cols (k×n) the
// im2col matrix (n = batch·out height·out width), output in NCHW-per-image
// column order:
//
//	name    layer                     m    k     n
//	conv1   7×7/2, 3→64, 112×112      64   147   8·112·112 = 100352
//	conv2   3×3, 64→64, 56×56         64   576   8·56·56   = 25088
//	conv3   3×3, 128→128, 28×28       128  1152  8·28·28   = 6272
//	conv4   3×3, 256→256, 14×14       256  2304  8·14·14   = 1568
//	conv5   3×3, 512→512, 7×7         512  4608  8·7·7     = 392
var benchShapes = []struct {
	name    string
	m, n, k int
}{
	{"256", 256, 256, 256},
	{"512", 512, 512, 512},
	{"1024", 1024, 1024, 1024},
	{"2048", 2048, 2048, 2048},
	{"conv1_m64_k147_n100352", 64, 100352, 147},
	{"conv2_m64_k576_n25088", 64, 25088, 576},
	{"conv3_m128_k1152_n6272", 128, 6272, 1152},
	{"conv4_m256_k2304_n1568", 256, 1568, 2304},
	{"conv5_m512_k4608_n392", 512, 392, 4608},
}

func randSlice(r *rand.Rand, n int) []float32 {
	s := make([]float32, n)
	for i := range s {
		s[i] = r.Float32()*2 - 1
	}
	return s
}

func reportGFLOPS(b *testing.B, m, n, k int) {
	b.ReportMetric(2*float64(m)*float64(n)*float64(k)*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
}

// BenchmarkSgemm: C = A·B (no transposes, beta = 0), default kernel and threads.
func BenchmarkSgemm(b *testing.B) {
	r := rand.New(rand.NewPCG(1, 1))
	for _, s := range benchShapes {
		b.Run(s.name, func(b *testing.B) {
			a, bb, c := randSlice(r, s.m*s.k), randSlice(r, s.k*s.n), make([]float32, s.m*s.n)
			Sgemm(false, false, s.m, s.n, s.k, 1, a, s.k, bb, s.n, 0, c, s.n) // warm pools
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				Sgemm(false, false, s.m, s.n, s.k, 1, a, s.k, bb, s.n, 0, c, s.n)
			}
			reportGFLOPS(b, s.m, s.n, s.k)
		})
	}
}

// BenchmarkSgemmPackedA: the convolution path, weights (A) packed once.
func BenchmarkSgemmPackedA(b *testing.B) {
	r := rand.New(rand.NewPCG(2, 2))
	for _, s := range benchShapes[4:] {
		b.Run(s.name, func(b *testing.B) {
			a, bb, c := randSlice(r, s.m*s.k), randSlice(r, s.k*s.n), make([]float32, s.m*s.n)
			pa := PackA(false, s.m, s.k, a, s.k)
			SgemmPackedA(s.n, 1, pa, false, bb, s.n, 0, c, s.n)
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				SgemmPackedA(s.n, 1, pa, false, bb, s.n, 0, c, s.n)
			}
			reportGFLOPS(b, s.m, s.n, s.k)
		})
	}
}

// BenchmarkSgemmPackedBSmallM: a dense layer at batch 8, weights (B, given
// as the n×k matrix a Linear layer exports with transB) packed once. The
// product streams the weights once per call, so it is reported in GB/s of
// packed B as well as GFLOP/s; the 64 MiB case does not fit the L3 cache
// and streams from memory.
func BenchmarkSgemmPackedBSmallM(b *testing.B) {
	r := rand.New(rand.NewPCG(3, 3))
	for _, s := range []struct {
		name    string
		m, n, k int
	}{{"m8_n2048_k2048", 8, 2048, 2048}, {"m8_n2048_k784", 8, 2048, 784}, {"m8_n1024_k2048", 8, 1024, 2048}, {"m8_n4096_k4096", 8, 4096, 4096}} {
		b.Run(s.name, func(b *testing.B) {
			a, w, c := randSlice(r, s.m*s.k), randSlice(r, s.k*s.n), make([]float32, s.m*s.n)
			pb := PackB(true, s.k, s.n, w, s.k)
			SgemmPackedB(false, s.m, 1, a, s.k, pb, 0, c, s.n)
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				SgemmPackedB(false, s.m, 1, a, s.k, pb, 0, c, s.n)
			}
			reportGFLOPS(b, s.m, s.n, s.k)
			b.ReportMetric(float64(4*s.k*s.n)*float64(b.N)/b.Elapsed().Seconds()/1e9, "GB/s")
		})
	}
}

// BenchmarkSgemmKernels: 1024³ with each kernel forced, and single-threaded.
func BenchmarkSgemmKernels(b *testing.B) {
	const n = 1024
	r := rand.New(rand.NewPCG(3, 3))
	a, bb, c := randSlice(r, n*n), randSlice(r, n*n), make([]float32, n*n)
	for _, k := range kernels {
		for _, th := range []int{1, 0} {
			b.Run(fmt.Sprintf("%s/threads=%d", k.name, th), func(b *testing.B) {
				restore, _ := setKernel(k.name)
				defer restore()
				SetThreads(th)
				defer SetThreads(0)
				Sgemm(false, false, n, n, n, 1, a, n, bb, n, 0, c, n)
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					Sgemm(false, false, n, n, n, 1, a, n, bb, n, 0, c, n)
				}
				reportGFLOPS(b, n, n, n)
			})
		}
	}
}

// BenchmarkMicroKernel: one micro-kernel call on L1-resident packed panels
// (the kernel's peak, without packing or memory traffic).
func BenchmarkMicroKernel(b *testing.B) {
	for _, k := range kernels {
		b.Run(k.name, func(b *testing.B) {
			kc := k.kc
			ap, bp := aligned(kc*k.mr), aligned(kc*k.nr)
			c := aligned(k.mr * k.nr)
			for i := 0; i < b.N; i++ {
				k.fn(kc, &ap[0], &bp[0], &c[0], k.nr, 1, 0, 1)
			}
			reportGFLOPS(b, k.mr, k.nr, kc)
		})
	}
}

// BenchmarkSgemmPackedBEncoder: the benchmark encoder's dense products at
// batch 8 × 128 tokens (bench/gen/export.py: d 256, ff 1024), C = X·W with
// the weights W (k×n, not transposed, as MatMul exports them) packed once:
// activations m = 1024 rows, small k.
func BenchmarkSgemmPackedBEncoder(b *testing.B) {
	r := rand.New(rand.NewPCG(4, 4))
	for _, s := range []struct {
		name    string
		m, n, k int
	}{{"qkv_1024x256x768", 1024, 768, 256}, {"ff1_1024x256x1024", 1024, 1024, 256}, {"ff2_1024x1024x256", 1024, 256, 1024}} {
		b.Run(s.name, func(b *testing.B) {
			a, w, c := randSlice(r, s.m*s.k), randSlice(r, s.k*s.n), make([]float32, s.m*s.n)
			pb := PackB(false, s.k, s.n, w, s.n)
			SgemmPackedB(false, s.m, 1, a, s.k, pb, 0, c, s.n)
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				SgemmPackedB(false, s.m, 1, a, s.k, pb, 0, c, s.n)
			}
			reportGFLOPS(b, s.m, s.n, s.k)
		})
	}
}
