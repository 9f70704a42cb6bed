package probe

import (
	"fmt"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas32"
	"gonum.org/v1/gonum/blas/blas64"

	"github.com/vitals-health/vitals/gemm"
	"github.com/vitals-health/vitals/tensor"
)

// Linear algebra: MatMul, Gemm, Einsum. Every float32 product goes through
// linGemm so that a faster GEMM can replace the gonum one in a single place.

func init() {
	reg("MatMul", matMulKernel, 1, 9, 13)
	reg("Gemm", gemmKernel, 1, 6, 7, 9, 11, 13)
	reg("Einsum", einsumKernel, 12)
}

func linTrans(t bool) blas.Transpose {
	if t {
		return blas.Trans
	}
	return blas.NoTrans
}

// linGemm computes C = alpha·op(A)·op(B) + beta·C for row-major float32
// matrices, op(A) m×k, op(B) k×n, C m×n (leading dimensions lda, ldb, ldc).
func linGemm(transA, transB bool, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	if m == 0 || n == 0 {
		return
	}
	if k == 0 {
		linScaleRows(c, m, n, ldc, beta)
		return
	}
	if linGemmReference {
		linGemmRef(transA, transB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
		return
	}
	gemm.Sgemm(transA, transB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
}

// linGemmReference makes linGemm use linGemmRef (tests flip it to compute
// reference results).
var linGemmReference = false

// linGemmRef is the gonum SGEMM that linGemm used before vitals/gemm: the
// reference the fast paths are tested against.
func linGemmRef(transA, transB bool, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	if m == 0 || n == 0 {
		return
	}
	if k == 0 {
		linScaleRows(c, m, n, ldc, beta)
		return
	}
	blas32.Implementation().Sgemm(linTrans(transA), linTrans(transB), m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
}

// linGemm64 is linGemm for float64.
func linGemm64(transA, transB bool, m, n, k int, alpha float64, a []float64, lda int, b []float64, ldb int, beta float64, c []float64, ldc int) {
	if m == 0 || n == 0 {
		return
	}
	if k == 0 {
		linScaleRows(c, m, n, ldc, beta)
		return
	}
	blas64.Implementation().Dgemm(linTrans(transA), linTrans(transB), m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
}

func linScaleRows[T Number](c []T, m, n, ldc int, beta T) {
	for i := 0; i < m; i++ {
		row := c[i*ldc : i*ldc+n]
		for j := range row {
			if beta == 0 {
				row[j] = 0
			} else {
				row[j] *= beta
			}
		}
	}
}

// linGemmT dispatches on the element type once: float32 and float64 go to
// BLAS, integer types to a plain triple loop.
func linGemmT[T Number](transA, transB bool, m, n, k int, alpha T, a []T, lda int, b []T, ldb int, beta T, c []T, ldc int) {
	switch av := any(a).(type) {
	case []float32:
		linGemm(transA, transB, m, n, k, float32(alpha), av, lda, any(b).([]float32), ldb, float32(beta), any(c).([]float32), ldc)
	case []float64:
		linGemm64(transA, transB, m, n, k, float64(alpha), av, lda, any(b).([]float64), ldb, float64(beta), any(c).([]float64), ldc)
	default:
		linGemmLoop(transA, transB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
	}
}

// linGemmLoop is the reference GEMM for integer types (i-k-j order).
func linGemmLoop[T Number](transA, transB bool, m, n, k int, alpha T, a []T, lda int, b []T, ldb int, beta T, c []T, ldc int) {
	linScaleRows(c, m, n, ldc, beta)
	// element strides of op(A) (rows, cols) and op(B)
	ar, ac := lda, 1
	if transA {
		ar, ac = 1, lda
	}
	br, bc := ldb, 1
	if transB {
		br, bc = 1, ldb
	}
	for i := 0; i < m; i++ {
		crow := c[i*ldc : i*ldc+n]
		for p := 0; p < k; p++ {
			av := alpha * a[i*ar+p*ac]
			if av == 0 {
				continue
			}
			off := p * br
			for j := range crow {
				crow[j] += av * b[off+j*bc]
			}
		}
	}
}

// matMulKernel: Y = A·B with NumPy semantics: operands of rank ≥ 2 are stacks
// of matrices whose batch dimensions broadcast; a 1-D A is a row vector and a
// 1-D B a column vector, the promoted dimension is removed from the result.
func matMulKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	a, b := c.In[0], c.In[1]
	if a.DType != b.DType {
		return fmt.Errorf("input types differ: %v and %v", a.DType, b.DType)
	}
	if a.Rank() == 0 || b.Rank() == 0 {
		return fmt.Errorf("MatMul needs inputs of rank ≥ 1, got %v and %v", a.Shape, b.Shape)
	}
	if av, ok := a.Data.([]float32); ok && b.Rank() == 2 && b.DType == a.DType && c.isInitializer(1) && !linGemmReference {
		if out, ok := matMulPackedB(c.Arena(), a, av, b); ok {
			c.Set(0, out)
			return nil
		}
	}
	var out *tensor.Tensor
	var err error
	switch av := a.Data.(type) {
	case []float32:
		out, err = linMatMul(c.Arena(), a, av, b, b.Data.([]float32))
	case []float64:
		out, err = linMatMul(c.Arena(), a, av, b, b.Data.([]float64))
	case []int64:
		out, err = linMatMul(c.Arena(), a, av, b, b.Data.([]int64))
	case []int32:
		out, err = linMatMul(c.Arena(), a, av, b, b.Data.([]int32))
	case []uint64:
		out, err = linMatMul(c.Arena(), a, av, b, b.Data.([]uint64))
	case []uint32:
		out, err = linMatMul(c.Arena(), a, av, b, b.Data.([]uint32))
	default:
		return fmt.Errorf("MatMul does not support %v", a.DType)
	}
	if err != nil {
		return err
	}
	c.Set(0, out)
	return nil
}

func linMatMul[T Number](ar *tensor.Arena, a *tensor.Tensor, ad []T, b *tensor.Tensor, bd []T) (*tensor.Tensor, error) {
	as, bs := a.Shape, b.Shape
	aVec, bVec := len(as) == 1, len(bs) == 1
	if aVec {
		as = []int{1, as[0]}
	}
	if bVec {
		bs = []int{bs[0], 1}
	}
	m, k := as[len(as)-2], as[len(as)-1]
	k2, n := bs[len(bs)-2], bs[len(bs)-1]
	if k != k2 {
		return nil, fmt.Errorf("MatMul inner dimensions differ: %v and %v", a.Shape, b.Shape)
	}
	aBatch, bBatch := as[:len(as)-2], bs[:len(bs)-2]
	batch, err := Broadcast(aBatch, bBatch)
	if err != nil {
		return nil, fmt.Errorf("MatMul batch dimensions: %w", err)
	}
	outShape := append([]int{}, batch...)
	if !aVec {
		outShape = append(outShape, m)
	}
	if !bVec {
		outShape = append(outShape, n)
	}
	total, err := tensor.NumElements(append(append([]int{}, batch...), m, n))
	if err != nil {
		return nil, err
	}
	// every element is written: each product has beta 0 (k = 0 writes zeros)
	out := ar.NewUninit(a.DType, []int{total}).Data.([]T)
	nb := 1
	for _, d := range batch {
		nb *= d
	}
	bCount := 1
	for _, d := range bBatch {
		bCount *= d
	}
	aCount := 1
	for _, d := range aBatch {
		aCount *= d
	}
	// One B shared by every A matrix: a single (batch·m)×k by k×n product.
	if bCount == 1 && aCount == nb {
		linGemmT(false, false, nb*m, n, k, 1, ad, max(k, 1), bd, max(n, 1), 0, out, max(n, 1))
		return tensor.From(out, outShape...), nil
	}
	sa := BroadcastStrides(aBatch, batch)
	sb := BroadcastStrides(bBatch, batch)
	if af, ok := any(ad).([]float32); ok && !linGemmReference && nb > 1 && m*n*k < matMulSerialMax {
		// many small products (attention heads): whole products per core
		bf, of := any(bd).([]float32), any(out).([]float32)
		parFor(nb, 1, func(lo, hi int) {
			for i := lo; i < hi; i++ {
				oa, ob, r := 0, 0, i
				for ax := len(batch) - 1; ax >= 0; ax-- {
					v := r % batch[ax]
					r /= batch[ax]
					oa += v * sa[ax]
					ob += v * sb[ax]
				}
				gemm.SgemmSerial(false, false, m, n, k, 1, af[oa*m*k:], max(k, 1), bf[ob*k*n:], max(n, 1), 0, of[i*m*n:], max(n, 1))
			}
		})
		return tensor.From(out, outShape...), nil
	}
	idx := make([]int, len(batch))
	for i := 0; i < nb; i++ {
		oa, ob := 0, 0
		for ax, v := range idx {
			oa += v * sa[ax]
			ob += v * sb[ax]
		}
		linGemmT(false, false, m, n, k, 1, ad[oa*m*k:], max(k, 1), bd[ob*k*n:], max(n, 1), 0, out[i*m*n:], max(n, 1))
		for ax := len(idx) - 1; ax >= 0; ax-- {
			idx[ax]++
			if idx[ax] < batch[ax] {
				break
			}
			idx[ax] = 0
		}
	}
	return tensor.From(out, outShape...), nil
}

// matMulSerialMax is the multiply-add count of one product of a batched
// MatMul below which the products are spread over the cores whole, each on
// one core, instead of splitting every product (common practice: splitting
// costs a hand-off per product; measured here on attention-sized products).
const matMulSerialMax = 1 << 24

// gemmKernel: Y = alpha·op(A)·op(B) + beta·C, op = transpose when transA/transB
// is set, C (optional from opset 11) broadcast unidirectionally to M×N.
func gemmKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	a, b, cc := c.In[0], c.In[1], c.Input(2)
	if a.DType != b.DType || (cc != nil && cc.DType != a.DType) {
		return fmt.Errorf("input types differ")
	}
	if a.Rank() != 2 || b.Rank() != 2 {
		return fmt.Errorf("Gemm needs 2-D A and B, got %v and %v", a.Shape, b.Shape)
	}
	tA, tB := c.Int("transA", 0) != 0, c.Int("transB", 0) != 0
	m, k := a.Shape[0], a.Shape[1]
	if tA {
		m, k = k, m
	}
	k2, n := b.Shape[0], b.Shape[1]
	if tB {
		k2, n = n, k2
	}
	if k != k2 {
		return fmt.Errorf("Gemm inner dimensions differ: A %v (transA=%v), B %v (transB=%v)", a.Shape, tA, b.Shape, tB)
	}
	alpha, beta := c.Float("alpha", 1), c.Float("beta", 1)
	// every element is written: by C's broadcast below, or by the product
	// with beta 0 (which never reads the output)
	out := c.Arena().NewUninit(a.DType, []int{m, n})
	if cc != nil && beta != 0 {
		if _, err := Broadcast(cc.Shape, out.Shape); err != nil || cc.Rank() > 2 {
			return fmt.Errorf("Gemm C of shape %v does not broadcast to %v", cc.Shape, out.Shape)
		}
		if cc.Rank() == 2 && (cc.Shape[0] != 1 && cc.Shape[0] != m || cc.Shape[1] != 1 && cc.Shape[1] != n) {
			return fmt.Errorf("Gemm C of shape %v does not broadcast to %v", cc.Shape, out.Shape)
		}
		if cc.Rank() == 1 && cc.Shape[0] != 1 && cc.Shape[0] != n {
			return fmt.Errorf("Gemm C of shape %v does not broadcast to %v", cc.Shape, out.Shape)
		}
		expandInto(out.Data, cc.Data, cc.Shape, out.Shape)
	} else {
		beta = 0
	}
	lda, ldb := max(a.Shape[1], 1), max(b.Shape[1], 1)
	if av, ok := a.Data.([]float32); ok && m > 0 && n > 0 && k > 0 && alpha != 0 && c.isInitializer(1) && !linGemmReference && gemm.PackAhead(m, tB) && packRoom(b) {
		pb := packedRight(b, b.F32(), tB, k, n, ldb)
		gemm.SgemmPackedB(tA, m, alpha, av, lda, pb, beta, out.F32(), n)
		c.Set(0, out)
		return nil
	}
	switch av := a.Data.(type) {
	case []float32:
		linGemm(tA, tB, m, n, k, alpha, av, lda, b.F32(), ldb, beta, out.F32(), max(n, 1))
	case []float64:
		linGemm64(tA, tB, m, n, k, float64(alpha), av, lda, b.F64(), ldb, float64(beta), out.F64(), max(n, 1))
	case []int64:
		linGemmLoop(tA, tB, m, n, k, int64(alpha), av, lda, b.I64(), ldb, int64(beta), out.I64(), max(n, 1))
	case []int32:
		linGemmLoop(tA, tB, m, n, k, int32(alpha), av, lda, b.Data.([]int32), ldb, int32(beta), out.Data.([]int32), max(n, 1))
	case []uint64:
		linGemmLoop(tA, tB, m, n, k, uint64(alpha), av, lda, b.Data.([]uint64), ldb, uint64(beta), out.Data.([]uint64), max(n, 1))
	case []uint32:
		linGemmLoop(tA, tB, m, n, k, uint32(alpha), av, lda, b.Data.([]uint32), ldb, uint32(beta), out.Data.([]uint32), max(n, 1))
	default:
		return fmt.Errorf("Gemm does not support %v", a.DType)
	}
	c.Set(0, out)
	return nil
}

// matMulPackedB is MatMul with a constant 2-D B ([k, n]) packed once: A's
// leading dimensions fold into the rows of one product. ok is false when the
// shapes do not fit (the general path then reports the error).
func matMulPackedB(ar *tensor.Arena, a *tensor.Tensor, ad []float32, b *tensor.Tensor) (*tensor.Tensor, bool) {
	k, n := b.Shape[0], b.Shape[1]
	if a.Rank() < 1 || a.Shape[a.Rank()-1] != k || k == 0 || n == 0 {
		return nil, false
	}
	outShape := append(append([]int{}, a.Shape[:a.Rank()-1]...), n)
	rows := len(ad) / k
	total, err := tensor.NumElements(outShape)
	if err != nil {
		return nil, false
	}
	res := ar.NewUninit(tensor.Float32, []int{total}) // the product (beta 0) writes every element
	out := res.F32()
	switch {
	case rows == 0:
	case gemm.PackAhead(rows, false) && packRoom(b):
		pb := packedRight(b, b.F32(), false, k, n, n)
		gemm.SgemmPackedB(false, rows, 1, ad, k, pb, 0, out, n)
	default:
		gemm.Sgemm(false, false, rows, n, k, 1, ad, k, b.F32(), n, 0, out, n)
	}
	return tensor.From(out, outShape...), true
}
