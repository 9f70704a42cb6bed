package gemm

import "golang.org/x/sys/cpu"

//go:noescape
func sgemmKernelAVX512(kc int, a, b, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX512S(kc int, a, b *float32, ldb int, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX512P(kc int, a, b, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX512B(kc int, a, b, c *float32, ldc int, alpha, beta float32, betaZero int, bias *float32)

//go:noescape
func sgemmKernelAVX512SB(kc int, a, b *float32, ldb int, c *float32, ldc int, alpha, beta float32, betaZero int, bias *float32)

//go:noescape
func sgemmKernelAVX512O(kc int, a, b *float32, offs *int, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX512W(kc int, a, b, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX512WP(kc int, a, b, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX512A(kc int, a *float32, lda int, b, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX512WA(kc int, a *float32, lda int, b, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX512AS(kc int, a *float32, lda int, b *float32, ldb int, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX512WAS(kc int, a *float32, lda int, b *float32, ldb int, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX512WS(kc int, a, b *float32, ldb int, c *float32, ldc int, alpha, beta float32, betaZero int)

//go:noescape
func sgemmKernelAVX2(kc int, a, b, c *float32, ldc int, alpha, beta float32, betaZero int)

// avx512Kernel: 8×48 zmm tile (24 accumulators + 3 B vectors + 2 broadcast
// registers of the 32); at two 512-bit FMAs per cycle a k step takes 12
// cycles for 3 B loads and 8 broadcasts. MR=8 divides the channel counts of
// typical convolutions (64, 128, 256, 512) exactly.
// kc=384 (upper bound; k is cut into equal slices, see kcFor): long enough
// that the C tile load/store per slice is <5% of the FMAs; the kc×NR B
// micro-panel (72 KiB) streams from L2 while the 8×kc A micro-panel (12 KiB)
// stays in L1. mc=96 keeps the mc×kc A block at 144 KiB in the 1 MiB L2
// (measured best of 48/96/144/192/384). nc=3072 keeps the kc×nc B panel at
// 4.5 MiB in the shared L3. These were measured on Zen 5 at 1024³ (kc in
// 160..1024: 384 and 256 best).
var avx512Kernel = &kernel{
	name: "avx512", mr: 8, nr: 48, kc: 384, mc: 96, nc: 3072,
	fn: sgemmKernelAVX512, fnStrided: sgemmKernelAVX512S, maxMDirect: 128,
	fnStream: sgemmKernelAVX512P, maxMStream: 16,
	fnBias: sgemmKernelAVX512B, fnStridedBias: sgemmKernelAVX512SB,
	fnOffs: sgemmKernelAVX512O, fnStridedA: sgemmKernelAVX512A,
	fnStridedAB: sgemmKernelAVX512AS,
}

// avx512WideKernel: 6×64 zmm tile (24 accumulators + 4 B vectors + 2
// broadcast registers), the same 24 multiply-adds per k step as the 8×48
// tile with 4 B loads and 6 broadcasts. It is not a kernel of its own in
// the list: Sgemm takes it instead of avx512Kernel for products whose n
// pads less to 64 columns than to 48 (widerFor), such as attention's
// 64-column context products (n = 64: a 48-column tile plus a second one
// with 16 of its 48 columns used) and 128- or 49-key score products.
// Blocking as avx512Kernel (mc = 96 is a multiple of 6). PackB takes it
// too for such n (a constant B packed once, e.g. the encoder's 1024-wide
// feed-forward weights, or its 256-column output projection: 288 columns
// of 48-wide tiles, 11% padding, against 256 exactly), so it has the same
// prefetching variant for few rows as avx512Kernel. Each C element is the
// same sequence of multiply-adds in either tile, so results are
// bit-identical (TestPackBWideSameBits).
var avx512WideKernel = &kernel{
	name: "avx512w", mr: 6, nr: 64, kc: 384, mc: 96, nc: 3072,
	fn: sgemmKernelAVX512W, fnStrided: sgemmKernelAVX512WS, maxMDirect: 128,
	fnStream: sgemmKernelAVX512WP, maxMStream: 16,
	fnStridedA: sgemmKernelAVX512WA, fnStridedAB: sgemmKernelAVX512WAS,
}

// widerFor returns the kernel a product of n columns runs on when k is the
// active kernel: avx512WideKernel in place of avx512Kernel when n's padding
// to 64 columns is smaller than to 48, else k.
func widerFor(k *kernel, n int) *kernel {
	if k == avx512Kernel && roundUp(n, 64)-n < roundUp(n, 48)-n {
		return avx512WideKernel
	}
	return k
}

// avx2Kernel: 6×16 ymm tile (12 accumulators + 2 B vectors + 2 broadcast
// registers of the 16). kc=256 keeps the B micro-panel at 16 KiB in L1;
// mc=144 (A block 144 KiB) fits L2; nc=3072 for the L3.
var avx2Kernel = &kernel{
	name: "avx2", mr: 6, nr: 16, kc: 256, mc: 144, nc: 3072,
	fn: sgemmKernelAVX2,
}

func availableKernels() []*kernel {
	var ks []*kernel
	if cpu.X86.HasAVX512F && cpu.X86.HasAVX2 && cpu.X86.HasFMA {
		ks = append(ks, avx512Kernel)
	}
	if cpu.X86.HasAVX2 && cpu.X86.HasFMA {
		ks = append(ks, avx2Kernel)
	}
	return append(ks, genericKernel)
}
