package gemm

import "unsafe"

//go:generate go run gen_kernels.go

// microKernel computes one MR×NR tile of C from a packed A micro-panel a
// (kc steps of MR values) and a packed B micro-panel b (kc steps of NR values):
//
//	C[i][j] = alpha·Σ_p a[p·MR+i]·b[p·NR+j] + beta·C[i][j]
//
// C is row-major with row stride ldc (elements). If betaZero != 0 the old C is
// never read, so garbage (NaN, Inf) in C does not propagate.
type microKernel func(kc int, a, b, c *float32, ldc int, alpha, beta float32, betaZero int)

// stridedKernel is a microKernel that reads B in place instead of packed: row
// p of the kc×NR micro-panel starts at b + p·ldb (NR floats, no padding).
type stridedKernel func(kc int, a, b *float32, ldb int, c *float32, ldc int, alpha, beta float32, betaZero int)

// biasKernel and stridedBiasKernel are microKernel and stridedKernel whose
// accumulators start from bias[i] (MR values) instead of 0.
type biasKernel func(kc int, a, b, c *float32, ldc int, alpha, beta float32, betaZero int, bias *float32)

// offsKernel is a microKernel reading B in place with a row table: row p
// of the kc×NR micro-panel starts at b + offs[p] (NR floats).
type offsKernel func(kc int, a, b *float32, offs *int, c *float32, ldc int, alpha, beta float32, betaZero int)

// stridedAKernel is a microKernel that reads A in place instead of packed:
// row i of the MR×kc micro-panel starts at a + i·lda (kc floats), B packed.
type stridedAKernel func(kc int, a *float32, lda int, b, c *float32, ldc int, alpha, beta float32, betaZero int)

// stridedABKernel reads both operands in place: A as stridedAKernel, B as
// stridedKernel.
type stridedABKernel func(kc int, a *float32, lda int, b *float32, ldb int, c *float32, ldc int, alpha, beta float32, betaZero int)

type stridedBiasKernel func(kc int, a, b *float32, ldb int, c *float32, ldc int, alpha, beta float32, betaZero int, bias *float32)

// kernel describes one micro-kernel and the cache blocking chosen for it.
//
// Blocking (Goto/BLIS): for each nc-wide column panel of op(B) and each kc-deep
// slice of k, the kc×nc panel of op(B) is packed into NR-wide micro-panels
// (kept in L3); for each mc-tall row block of op(A) the mc×kc block is packed
// into MR-tall micro-panels (kept in L2, reused by all nc/NR B micro-panels);
// the micro-kernel then walks the block MR×NR tile by tile, B micro-panel
// outer, A micro-panel inner, so one kc×NR B micro-panel is reused mc/MR
// times from L1/L2 while the A micro-panels stream from L2. The first k slice
// applies beta to C, later slices accumulate into it.
type kernel struct {
	name       string
	mr, nr     int
	kc, mc, nc int
	fn         microKernel
	// fnStrided, if set, is used when B is not transposed and the rows of
	// op(A) handled by one worker fit one mc block (at most maxMDirect): every
	// B micro-panel is then read only m/MR times, straight from the caller's
	// matrix, and packing B (a full extra pass over k·n floats, the dominant
	// cost for small m such as the 64-channel convolutions) is skipped.
	fnStrided  stridedKernel
	maxMDirect int
	// fnStream, if set, is fn with software prefetch of packed B ahead of
	// use, for calls whose worker has at most maxMStream rows of op(A): each
	// B value is then used by so few rows that the product streams B from
	// memory, where the hardware prefetcher alone fell short (a batch-8
	// dense layer with cold weights: BenchmarkSgemmPackedBSmallM).
	fnStream   microKernel
	maxMStream int
	// fnBias and fnStridedBias, if set, are fn and fnStrided starting from
	// a per-row bias: the first k slice of a product with a bias (see
	// SgemmPackedABias) adds it in registers instead of reading it from C.
	fnBias        biasKernel
	fnStridedBias stridedBiasKernel
	// fnOffs, if set, reads B through a row table (see SgemmPackedAOffsets).
	fnOffs offsKernel
	// fnStridedA, if set, is fn reading a non-transposed A in place, used
	// for workers with more than maxMStream rows whose B is packed: A's
	// rows are then read straight from the caller's matrix (n/NR times per
	// kc slice, from L1/L2 like a packed block) and packing A, a pass over
	// m·k floats at about 0.8 ns each in Go, is skipped; it was 6% of the
	// encoder's 1024×256×768 product and 14% of its 1024×1024×256 one. Row
	// micro-panels cut by the matrix edge are still packed.
	fnStridedA stridedAKernel
	// fnStridedAB, if set, is fnStrided reading A in place as fnStridedA
	// does: products with B read in place (at most maxMDirect rows, such
	// as attention's per-head products) then pack neither operand.
	fnStridedAB stridedABKernel
}

// kcFor returns the k-slice depth used for a product of depth k: the k range
// is cut into ceil(k/kc) slices of equal depth (at most kc), so no call ends
// with a short, inefficient slice (e.g. k=1024, kc=384 gives 3 slices of 342).
func (kn *kernel) kcFor(k int) int {
	if k <= kn.kc {
		return max(k, 1)
	}
	s := (k + kn.kc - 1) / kn.kc
	return (k + s - 1) / s
}

// genericKernel is the portable micro-kernel: 4×8 tile in plain Go. It is the
// fallback on CPUs without AVX2/FMA and on other architectures.
var genericKernel = &kernel{
	name: "go", mr: 4, nr: 8, kc: 256, mc: 128, nc: 2048,
	fn: goKernel,
}

func goKernel(kc int, a, b, c *float32, ldc int, alpha, beta float32, betaZero int) {
	const mr, nr = 4, 8
	var acc [mr][nr]float32
	if kc > 0 {
		as := unsafe.Slice(a, kc*mr)
		bs := unsafe.Slice(b, kc*nr)
		for p := 0; p < kc; p++ {
			ap := as[p*mr : p*mr+mr : p*mr+mr]
			bp := bs[p*nr : p*nr+nr : p*nr+nr]
			for i := 0; i < mr; i++ {
				ai := ap[i]
				r := &acc[i]
				for j := 0; j < nr; j++ {
					r[j] += ai * bp[j]
				}
			}
		}
	}
	cs := unsafe.Slice(c, (mr-1)*ldc+nr)
	for i := 0; i < mr; i++ {
		row := cs[i*ldc : i*ldc+nr : i*ldc+nr]
		if betaZero != 0 {
			for j := range row {
				row[j] = alpha * acc[i][j]
			}
		} else {
			for j := range row {
				row[j] = alpha*acc[i][j] + beta*row[j]
			}
		}
	}
}
