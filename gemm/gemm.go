// Package gemm is a cache-blocked, packed single-precision matrix multiply
// (SGEMM) for row-major matrices with AVX-512 and AVX2+FMA micro-kernels in
// Go assembly, chosen at run time, and a pure-Go fallback.
//
// It computes
//
//	C = alpha·op(A)·op(B) + beta·C,   op(X) = X or Xᵀ,
//
// with op(A) m×k, op(B) k×n and C m×n, all row-major with leading dimensions
// (row strides, in elements) lda, ldb, ldc. When beta == 0, C is only written,
// never read, so NaN or Inf garbage in C does not reach the result.
//
// Algorithm (Goto/BLIS): the product is cut into kc×nc panels of op(B) and
// mc×kc blocks of op(A), each packed into a contiguous buffer of MR-tall (A)
// and NR-wide (B) micro-panels, zero padded to whole micro-panels. A register
// tile micro-kernel then computes MR×NR tiles of C with the packed operands
// streaming from L1/L2. Tiles cut by the matrix edge are computed into a small
// scratch tile and only the valid part is written back. The per-kernel blocking
// parameters and their reasons are documented with each kernel.
//
// Parallelism: a call is split into one contiguous range of C columns (or rows,
// when m > n) per worker, each range a whole number of micro-tiles, so workers
// never share a C tile and never synchronise inside a call. Workers are a
// persistent pool; packing buffers are recycled through a sync.Pool, so the
// steady state does not allocate.
//
// Convolution (im2col): for an NCHW convolution with weights W
// [Cout][Cin·kh·kw], pack W once with PackA(false, Cout, Cin·kh·kw, W, Cin·kh·kw)
// and, per batch, write the im2col matrix cols [Cin·kh·kw][N·Hout·Wout] and call
// SgemmPackedA(N·Hout·Wout, 1, pw, false, cols, N·Hout·Wout, 0, out, N·Hout·Wout);
// out is then [Cout][N·Hout·Wout] (per-channel planes over the batch; add the
// bias with beta=1 over a pre-filled out, or afterwards). For one image at a
// time, n = Hout·Wout and out is directly the image's [Cout][Hout][Wout]. Gemm
// (ONNX) with a constant B maps to PackB/SgemmPackedB. Calls are safe from
// several goroutines at once; each call uses up to Threads() workers.
package gemm

import (
	"fmt"
	"runtime"
	"sync/atomic"

	"github.com/vitals-health/vitals/internal/pages"
	"github.com/vitals-health/vitals/internal/par"
)

var (
	kernels = availableKernels()
	// active is the kernel used by new calls; tests force others through setKernel.
	active atomic.Pointer[kernel]
	// threads is the configured worker count (0 = GOMAXPROCS).
	threads atomic.Int64
)

func init() { active.Store(kernels[0]) }

// KernelName reports the micro-kernel in use: "avx512", "avx2" or "go".
func KernelName() string { return active.Load().name }

// SetThreads sets the number of workers a call may use. n <= 0 restores the
// default, runtime.GOMAXPROCS(0) at call time.
func SetThreads(n int) {
	if n < 0 {
		n = 0
	}
	threads.Store(int64(n))
}

// Threads reports the number of workers a call may use.
func Threads() int {
	if t := int(threads.Load()); t > 0 {
		return t
	}
	return runtime.GOMAXPROCS(0)
}

// setKernel forces a kernel by name (for tests); it returns a restore func.
func setKernel(name string) (restore func(), ok bool) {
	old := active.Load()
	for _, k := range kernels {
		if k.name == name {
			active.Store(k)
			return func() { active.Store(old) }, true
		}
	}
	return func() {}, false
}

// Sgemm computes C = alpha·op(A)·op(B) + beta·C, row-major, op(X) = X or Xᵀ.
// A is m×k (or k×m if transA) with leading dimension lda; B is k×n (or n×k)
// with ldb; C is m×n with ldc. It panics if a slice is too short or a leading
// dimension too small.
func Sgemm(transA, transB bool, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	sgemmOn(Threads(), transA, transB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
}

// SgemmSerial is Sgemm on the calling goroutine only, for callers that run
// many small independent products in parallel themselves (batched MatMul).
func SgemmSerial(transA, transB bool, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	sgemmOn(1, transA, transB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
}

func sgemmOn(workers int, transA, transB bool, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	checkDims(m, n, k, ldc, len(c))
	checkOperand("A", transA, m, k, a, lda)
	checkOperand("B", transB, k, n, b, ldb)
	multiply(workers, widerFor(active.Load(), n), m, n, k, alpha,
		operand{data: a, ld: lda, trans: transA},
		operand{data: b, ld: ldb, trans: transB},
		beta, c, ldc)
}

// multiply finishes a product with nothing to multiply (see trivial) and
// runs any other on at most workers goroutines; the caller has checked the
// arguments.
func multiply(workers int, kern *kernel, m, n, k int, alpha float32, A, B operand, beta float32, c []float32, ldc int) {
	if !trivial(m, n, k, alpha, beta, c, ldc) {
		runOn(workers, kern, m, n, k, alpha, A, B, beta, c, ldc)
	}
}

// trivial finishes the products with nothing to multiply (m or n is 0:
// nothing; k or alpha is 0: C = beta·C) and reports whether it did.
func trivial(m, n, k int, alpha, beta float32, c []float32, ldc int) bool {
	if m == 0 || n == 0 {
		return true
	}
	if k == 0 || alpha == 0 {
		scaleC(m, n, beta, c, ldc)
		return true
	}
	return false
}

// PackedA is op(A) (m×k) packed once in the layout the micro-kernel reads,
// for reuse across many products (e.g. convolution weights, C = W·cols).
type PackedA struct {
	kern *kernel
	m, k int
	data []float32
}

// PackedB is op(B) (k×n) packed once in the layout the micro-kernel reads,
// for reuse across many products (e.g. fully connected weights, C = X·Wᵀ).
type PackedB struct {
	kern *kernel
	k, n int
	data []float32
}

// Rows and Cols report the shape of op(A).
func (p *PackedA) Rows() int { return p.m }
func (p *PackedA) Cols() int { return p.k }

// Rows and Cols report the shape of op(B).
func (p *PackedB) Rows() int { return p.k }
func (p *PackedB) Cols() int { return p.n }

// PackA packs op(A) (m×k; A is k×m if transA) for SgemmPackedA. The layout is,
// for each kc-deep slice of k, the m rows (padded to a multiple of MR) as
// MR-tall micro-panels, each stored k step by k step.
func PackA(transA bool, m, k int, a []float32, lda int) *PackedA {
	return PackAInto(nil, transA, m, k, a, lda)
}

// PackAInto is PackA reusing p's storage when it is large enough (p may be
// nil): for callers that pack a new A of similar size many times.
func PackAInto(p *PackedA, transA bool, m, k int, a []float32, lda int) *PackedA {
	checkDims(m, 0, k, 0, 0)
	checkOperand("A", transA, m, k, a, lda)
	kern := active.Load()
	mp := roundUp(m, kern.mr)
	if p == nil || cap(p.data) < mp*k {
		p = &PackedA{data: pages.Float32s(mp * k)}
	}
	p.kern, p.m, p.k, p.data = kern, m, k, p.data[:mp*k]
	src := operand{data: a, ld: lda, trans: transA}
	kc := kern.kcFor(k)
	for pc := 0; pc < k; pc += kc {
		kcur := min(kc, k-pc)
		packA(kern.mr, p.data[pc*mp:pc*mp+mp*kcur], src, 0, m, pc, kcur)
	}
	return p
}

// PackB packs op(B) (k×n; B is n×k if transB) for SgemmPackedB. The layout is,
// for each kc-deep slice of k, the n columns (padded to a multiple of NR) as
// NR-wide micro-panels, each stored k step by k step. NR is that of the
// kernel Sgemm would use for n columns (widerFor): the products then pad n
// the least.
func PackB(transB bool, k, n int, b []float32, ldb int) *PackedB {
	checkDims(0, n, k, 0, 0)
	checkOperand("B", transB, k, n, b, ldb)
	return packBFor(widerFor(active.Load(), n), transB, k, n, b, ldb)
}

// packBFor is PackB for the micro-kernel kern.
func packBFor(kern *kernel, transB bool, k, n int, b []float32, ldb int) *PackedB {
	np := roundUp(n, kern.nr)
	p := &PackedB{kern: kern, k: k, n: n, data: pages.Float32s(np * k)}
	src := operand{data: b, ld: ldb, trans: transB}
	kc := kern.kcFor(k)
	// large operands (a model's weights, packed once at start-up) are
	// packed by all workers, each a contiguous run of micro-panels
	w := 1
	if np*k >= minPackParallel {
		w = min(Threads(), np/kern.nr)
	}
	panels := np / kern.nr
	par.Do(w, func(i int) {
		q0, q1 := panels*i/w*kern.nr, panels*(i+1)/w*kern.nr
		for pc := 0; pc < k; pc += kc {
			kcur := min(kc, k-pc)
			slice := p.data[pc*np : pc*np+np*kcur]
			packB(kern.nr, slice[q0*kcur:], src, pc, kcur, q0, min(q1, n)-q0)
		}
	})
	return p
}

// minPackParallel is the packed size (floats) from which PackB uses every
// worker (common practice: below a few MiB the goroutine start-up is not
// worth it).
const minPackParallel = 1 << 20

// PackAhead reports whether packing a constant op(B) once with PackB, and
// keeping the packed copy, saves time over Sgemm for products whose op(A)
// has m rows. A transposed B (transB: B stored n×k, as Gemm's weights with
// transB=1) always gains: no kernel reads it in place, so Sgemm packs all of
// it in every call, a gather across B's rows (for GPT-2's tied 50257×768
// output projection, 154 MB re-read per item). A non-transposed B with m in
// (maxMStream, maxMDirect] of a kernel that reads B in place (the strided
// AVX-512 kernel: 16 < m ≤ 128) does not: it is read straight from the
// caller's matrix as often as a packed copy would be, and a copy would only
// cost memory (as much as the weight again). Outside that range (few rows:
// the prefetching kernel streams packed B; many rows: B is packed per mc
// block) it does.
func PackAhead(m int, transB bool) bool {
	kern := active.Load()
	if kern.fnStrided == nil || transB {
		return true
	}
	return m <= kern.maxMStream || m > kern.maxMDirect
}

// SgemmPackedA computes C = alpha·A·op(B) + beta·C with A packed by PackA
// (m×k taken from pa). B and C are as in Sgemm.
func SgemmPackedA(n int, alpha float32, pa *PackedA, transB bool, b []float32, ldb int, beta float32, c []float32, ldc int) {
	sgemmPackedAOn(Threads(), n, alpha, pa, transB, b, ldb, beta, c, ldc)
}

func sgemmPackedAOn(workers, n int, alpha float32, pa *PackedA, transB bool, b []float32, ldb int, beta float32, c []float32, ldc int) {
	m, k := pa.m, pa.k
	checkDims(m, n, k, ldc, len(c))
	checkOperand("B", transB, k, n, b, ldb)
	multiply(workers, pa.kern, m, n, k, alpha, pa.operand(), operand{data: b, ld: ldb, trans: transB}, beta, c, ldc)
}

// SgemmPackedASerial is SgemmPackedA on the calling goroutine only.
func SgemmPackedASerial(n int, alpha float32, pa *PackedA, transB bool, b []float32, ldb int, beta float32, c []float32, ldc int) {
	sgemmPackedAOn(1, n, alpha, pa, transB, b, ldb, beta, c, ldc)
}

// SgemmPackedABias computes C = A·op(B) + bias·1ᵀ, bias[i] added to every
// element of row i (len(bias) ≥ m), with A packed by PackA and B and C as in
// Sgemm: a layer's product and its bias in one pass over C. The bias is
// added in registers when the micro-kernel has a bias variant, else C is
// set to it first and the product accumulates onto it.
func SgemmPackedABias(n int, pa *PackedA, transB bool, b []float32, ldb int, bias, c []float32, ldc int) {
	sgemmPackedABiasOn(Threads(), n, pa, transB, b, ldb, bias, c, ldc)
}

// SgemmPackedABiasSerial is SgemmPackedABias on the calling goroutine only.
func SgemmPackedABiasSerial(n int, pa *PackedA, transB bool, b []float32, ldb int, bias, c []float32, ldc int) {
	sgemmPackedABiasOn(1, n, pa, transB, b, ldb, bias, c, ldc)
}

func sgemmPackedABiasOn(workers, n int, pa *PackedA, transB bool, b []float32, ldb int, bias, c []float32, ldc int) {
	m, k := pa.m, pa.k
	checkDims(m, n, k, ldc, len(c))
	checkOperand("B", transB, k, n, b, ldb)
	if len(bias) < m {
		panic(fmt.Sprintf("gemm: bias has %d values, want %d", len(bias), m))
	}
	if pa.kern.fnBias == nil || k == 0 {
		for i := 0; i < m; i++ {
			row := c[i*ldc : i*ldc+n]
			for j := range row {
				row[j] = bias[i]
			}
		}
		multiply(workers, pa.kern, m, n, k, 1, pa.operand(), operand{data: b, ld: ldb, trans: transB}, 1, c, ldc)
		return
	}
	A := pa.operand()
	A.bias = bias
	multiply(workers, pa.kern, m, n, k, 1, A, operand{data: b, ld: ldb, trans: transB}, 0, c, ldc)
}

// PackBFunc writes op(B)[p0:p0+kc, j0:j0+cols] into dst as nr-wide
// micro-panels, the layout the micro-kernel reads:
//
//	dst[q·nr·kc + p·nr + j] = op(B)[p0+p, j0+q·nr+j],  0 for q·nr+j ≥ cols.
//
// It lets a caller produce B panel by panel instead of materialising it (a
// convolution's im2col matrix, built straight from the image). The driver
// calls it from several goroutines at once, always on disjoint dst.
type PackBFunc func(nr int, dst []float32, p0, kc, j0, cols int)

// SgemmPackedAFunc computes C = alpha·A·B + beta·C with A packed by PackA
// (m×k) and B (k×n) written on demand by pack; C is as in Sgemm.
func SgemmPackedAFunc(n int, alpha float32, pa *PackedA, pack PackBFunc, beta float32, c []float32, ldc int) {
	sgemmPackedAFuncOn(Threads(), n, alpha, pa, pack, beta, c, ldc)
}

// SgemmPackedAFuncSerial is SgemmPackedAFunc on the calling goroutine only,
// for callers that run independent products in parallel themselves.
func SgemmPackedAFuncSerial(n int, alpha float32, pa *PackedA, pack PackBFunc, beta float32, c []float32, ldc int) {
	sgemmPackedAFuncOn(1, n, alpha, pa, pack, beta, c, ldc)
}

func sgemmPackedAFuncOn(workers, n int, alpha float32, pa *PackedA, pack PackBFunc, beta float32, c []float32, ldc int) {
	m, k := pa.m, pa.k
	checkDims(m, n, k, ldc, len(c))
	multiply(workers, pa.kern, m, n, k, alpha, pa.operand(), operand{pack: pack}, beta, c, ldc)
}

// SgemmFunc is Sgemm with B (k×n) written on demand by pack (see PackBFunc).
func SgemmFunc(transA bool, m, n, k int, alpha float32, a []float32, lda int, pack PackBFunc, beta float32, c []float32, ldc int) {
	checkDims(m, n, k, ldc, len(c))
	checkOperand("A", transA, m, k, a, lda)
	multiply(Threads(), active.Load(), m, n, k, alpha, operand{data: a, ld: lda, trans: transA}, operand{pack: pack}, beta, c, ldc)
}

// SgemmFuncSerial is SgemmFunc on the calling goroutine only, for callers
// that run independent products in parallel themselves.
func SgemmFuncSerial(transA bool, m, n, k int, alpha float32, a []float32, lda int, pack PackBFunc, beta float32, c []float32, ldc int) {
	checkDims(m, n, k, ldc, len(c))
	checkOperand("A", transA, m, k, a, lda)
	multiply(1, active.Load(), m, n, k, alpha, operand{data: a, ld: lda, trans: transA}, operand{pack: pack}, beta, c, ldc)
}

// SgemmPackedB computes C = alpha·op(A)·B + beta·C with B packed by PackB
// (k×n taken from pb). A and C are as in Sgemm.
func SgemmPackedB(transA bool, m int, alpha float32, a []float32, lda int, pb *PackedB, beta float32, c []float32, ldc int) {
	k, n := pb.k, pb.n
	checkDims(m, n, k, ldc, len(c))
	checkOperand("A", transA, m, k, a, lda)
	multiply(Threads(), pb.kern, m, n, k, alpha, operand{data: a, ld: lda, trans: transA}, pb.operand(), beta, c, ldc)
}

// operand is pa as the left operand of a product.
func (pa *PackedA) operand() operand {
	return operand{packed: pa.data, padded: roundUp(pa.m, pa.kern.mr)}
}

// operand is pb as the right operand of a product.
func (pb *PackedB) operand() operand {
	return operand{packed: pb.data, padded: roundUp(pb.n, pb.kern.nr)}
}

func roundUp(x, m int) int { return (x + m - 1) / m * m }

func checkDims(m, n, k, ldc, lenC int) {
	if m < 0 || n < 0 || k < 0 {
		panic("gemm: negative dimension")
	}
	if m > 0 && n > 0 {
		if ldc < max(1, n) {
			panic("gemm: ldc < n")
		}
		if lenC < (m-1)*ldc+n {
			panic("gemm: C slice too short")
		}
	}
}

// checkOperand checks a rows×cols op(X) stored as X (or Xᵀ if trans).
func checkOperand(name string, trans bool, rows, cols int, x []float32, ld int) {
	if trans {
		rows, cols = cols, rows
	}
	if ld < max(1, cols) {
		panic("gemm: leading dimension of " + name + " too small")
	}
	if rows > 0 && cols > 0 && len(x) < (rows-1)*ld+cols {
		panic("gemm: " + name + " slice too short")
	}
}

// scaleC sets C = beta·C (C = 0 when beta == 0, ignoring old contents).
func scaleC(m, n int, beta float32, c []float32, ldc int) {
	if beta == 1 {
		return
	}
	for i := 0; i < m; i++ {
		row := c[i*ldc : i*ldc+n]
		if beta == 0 {
			clear(row)
		} else {
			for j := range row {
				row[j] *= beta
			}
		}
	}
}
