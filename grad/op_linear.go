package grad

import (
	"fmt"

	"github.com/vitals-health/vitals/gemm"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
)

// Gemm and MatMul. For Y = A·B: dL/dA = G·Bᵀ, dL/dB = Aᵀ·G (G = dL/dY);
// transposed operands get the transposed result, batched MatMul sums the
// batches broadcasting repeated an operand over.

func init() {
	register("Gemm", gemmVJP)
	register("MatMul", matmulVJP)
}

// mm computes out += alpha·op(a)·op(b), a stored [ar, ac] and b [br, bc]
// row-major, op the transpose when ta/tb.
func mm(ta, tb bool, alpha float64, a []float64, ar, ac int, b []float64, br, bc int, out []float64) {
	m, k := ar, ac
	if ta {
		m, k = ac, ar
	}
	n := bc
	if tb {
		n = br
	}
	if m == 0 || n == 0 || k == 0 {
		return
	}
	t := func(x bool) blas.Transpose {
		if x {
			return blas.Trans
		}
		return blas.NoTrans
	}
	blas64.Gemm(t(ta), t(tb), alpha,
		blas64.General{Rows: ar, Cols: ac, Stride: ac, Data: a},
		blas64.General{Rows: br, Cols: bc, Stride: bc, Data: b},
		1, blas64.General{Rows: m, Cols: n, Stride: n, Data: out})
}

// gemmVJP: Y = α·op(A)·op(B) + β·C, op(A) [M,K], op(B) [K,N].
func gemmVJP(o *Op) error {
	if err := o.Need(2); err != nil {
		return err
	}
	A, B := o.In[0], o.In[1]
	if A.Rank() != 2 || B.Rank() != 2 {
		return fmt.Errorf("Gemm wants 2-D A and B, got %v and %v", A.Shape, B.Shape)
	}
	tA, tB := o.Int("transA", 0) != 0, o.Int("transB", 0) != 0
	alpha, beta := float64(o.Float("alpha", 1)), float64(o.Float("beta", 1))
	M, N := o.Out[0].Shape[0], o.Out[0].Shape[1]
	ar, ac, br, bc := A.Shape[0], A.Shape[1], B.Shape[0], B.Shape[1]
	a32, ok1 := A.Data.([]float32)
	b32, ok2 := B.Data.([]float32)
	if ok1 && ok2 && !forceF64 && o.f32 && (o.want32(0) || !o.Needs(0)) && (o.Input(2) == nil || !o.Needs(2) || o.In[2].Rank() <= 2) {
		gemm32(o, tA, tB, float32(alpha), beta, M, N, a32, ar, ac, b32, br, bc)
		return nil
	}
	g := o.G(0)
	if ok1 && ok2 && !forceF64 {
		gemmF32(o, tA, tB, float32(alpha), g, M, N, a32, ar, ac, b32, br, bc)
	} else if ga := o.Grad(0); ga != nil {
		b := o.X(1)
		if !tA { // dA = α·G·op(B)ᵀ
			mm(false, !tB, alpha, g, M, N, b, br, bc, ga)
		} else { // dA = α·op(B)·Gᵀ
			mm(tB, true, alpha, b, br, bc, g, M, N, ga)
		}
	}
	if gb := o.Grad(1); gb != nil && !(ok1 && ok2 && !forceF64) {
		a := o.X(0)
		if !tB { // dB = α·op(A)ᵀ·G
			mm(!tA, false, alpha, a, ar, ac, g, M, N, gb)
		} else { // dB = α·Gᵀ·op(A)
			mm(true, tA, alpha, g, M, N, a, ar, ac, gb)
		}
	}
	if gc := o.Grad(2); gc != nil {
		switch {
		case len(gc) == N && (o.In[2].Rank() == 1 || o.In[2].Shape[0] == 1): // a bias row: column sums
			for i := 0; i < M; i++ {
				for j, v := range g[i*N : (i+1)*N] {
					gc[j] += beta * v
				}
			}
		default:
			m := bcastMap(o.In[2].Shape, o.Out[0].Shape)
			for k := range g {
				gc[m[k]] += beta * g[k]
			}
		}
	}
	return nil
}

// matmulVJP: numpy matmul semantics (1-D operands promoted, batch axes
// broadcast).
func matmulVJP(o *Op) error {
	if err := o.Need(2); err != nil {
		return err
	}
	A, B := o.In[0], o.In[1]
	as, bs := append([]int(nil), A.Shape...), append([]int(nil), B.Shape...)
	if len(as) == 1 {
		as = []int{1, as[0]}
	}
	if len(bs) == 1 {
		bs = []int{bs[0], 1}
	}
	if len(as) < 2 || len(bs) < 2 {
		return fmt.Errorf("MatMul of scalars")
	}
	M, K, N := as[len(as)-2], as[len(as)-1], bs[len(bs)-1]
	if bs[len(bs)-2] != K {
		return fmt.Errorf("MatMul shapes %v and %v do not agree", A.Shape, B.Shape)
	}
	abatch, bbatch := as[:len(as)-2], bs[:len(bs)-2]
	r := max(len(abatch), len(bbatch))
	batch := make([]int, r)
	for i := range batch {
		da, db := 1, 1
		if j := i - (r - len(abatch)); j >= 0 {
			da = abatch[j]
		}
		if j := i - (r - len(bbatch)); j >= 0 {
			db = bbatch[j]
		}
		batch[i] = max(da, db)
		if da != db && da != 1 && db != 1 {
			return fmt.Errorf("MatMul batch axes %v and %v do not broadcast", A.Shape, B.Shape)
		}
	}
	ma, mb := bcastMap(abatch, batch), bcastMap(bbatch, batch)
	g := o.G(0)
	ga, gb := o.Grad(0), o.Grad(1)
	var a, b []float64
	if gb != nil {
		a = o.X(0)
	}
	if ga != nil {
		b = o.X(1)
	}
	for k := range ma {
		gk := g[k*M*N : (k+1)*M*N]
		if ga != nil { // dA_k += G_k·B_kᵀ
			mm(false, true, 1, gk, M, N, b[mb[k]*K*N:(mb[k]+1)*K*N], K, N, ga[ma[k]*M*K:(ma[k]+1)*M*K])
		}
		if gb != nil { // dB_k += A_kᵀ·G_k
			mm(true, false, 1, a[ma[k]*M*K:(ma[k]+1)*M*K], M, K, gk, M, N, gb[mb[k]*K*N:(mb[k]+1)*K*N])
		}
	}
	return nil
}

// gemm32 is gemmVJP for float32 operands with float32 gradients
// (grad32.go): G read as float32 (narrowed once when it comes as float64,
// as the seed does), dA written by the SGEMM in float32, dB and dC summed
// in float64.
func gemm32(o *Op, tA, tB bool, alpha float32, beta float64, M, N int, a []float32, ar, ac int, b []float32, br, bc int) {
	g32 := o.G32(0)
	if ga := o.GradFull32(0); ga != nil {
		if !tA { // dA [M,K] = α·G·op(B)ᵀ
			K := ac
			gemm.Sgemm(false, !tB, M, K, N, alpha, g32, N, b, bc, 0, ga, K)
		} else { // A [K,M]: dA = α·op(B)·Gᵀ [K,M]
			K := ar
			gemm.Sgemm(tB, true, K, M, N, alpha, b, bc, g32, N, 0, ga, M)
		}
	}
	if gb := o.Grad(1); gb != nil {
		out := scratch(len(gb))
		defer release(out)
		if !tB { // B [K,N]: dB = α·op(A)ᵀ·G
			gemm.Sgemm(!tA, false, br, N, M, alpha, a, ac, g32, N, 0, out, N)
		} else { // B [N,K]: dB = α·Gᵀ·op(A)
			gemm.Sgemm(true, tA, N, bc, M, alpha, g32, N, a, ac, 0, out, bc)
		}
		for i, v := range out {
			gb[i] += float64(v)
		}
	}
	if gc := o.Grad(2); gc != nil {
		switch {
		case len(gc) == N && (o.In[2].Rank() == 1 || o.In[2].Shape[0] == 1): // a bias row: column sums
			for i := 0; i < M; i++ {
				for j, v := range g32[i*N : (i+1)*N] {
					gc[j] += beta * float64(v)
				}
			}
		default:
			m := bcastMap(o.In[2].Shape, o.Out[0].Shape)
			for k, v := range g32 {
				gc[m[k]] += beta * float64(v)
			}
		}
	}
}

// gemmF32 is Gemm's dA and dB for float32 operands, with the float32 SGEMM
// of package gemm (the products' float32 rounding is far below the 1e-4 of
// the torch comparison), added into the float64 gradients.
func gemmF32(o *Op, tA, tB bool, alpha float32, g []float64, M, N int, a []float32, ar, ac int, b []float32, br, bc int) {
	ga, gb := o.Grad(0), o.Grad(1)
	if ga == nil && gb == nil {
		return
	}
	g32 := scratch(len(g))
	defer release(g32)
	for i, v := range g {
		g32[i] = float32(v)
	}
	if ga != nil {
		out := scratch(len(ga))
		defer release(out)
		if !tA { // dA [M,K] = α·G·op(B)ᵀ
			K := ac
			if !tB { // B [K,N]
				gemm.Sgemm(false, true, M, K, N, alpha, g32, N, b, bc, 0, out, K)
			} else { // B [N,K]
				gemm.Sgemm(false, false, M, K, N, alpha, g32, N, b, bc, 0, out, K)
			}
		} else { // A [K,M]: dA = α·op(B)·Gᵀ [K,M]
			K := ar
			if !tB {
				gemm.Sgemm(false, true, K, M, N, alpha, b, bc, g32, N, 0, out, M)
			} else {
				gemm.Sgemm(true, true, K, M, N, alpha, b, bc, g32, N, 0, out, M)
			}
		}
		for i, v := range out {
			ga[i] += float64(v)
		}
	}
	if gb != nil {
		out := scratch(len(gb))
		defer release(out)
		if !tB { // B [K,N]: dB = α·op(A)ᵀ·G
			K := br
			if !tA { // A [M,K]
				gemm.Sgemm(true, false, K, N, M, alpha, a, ac, g32, N, 0, out, N)
			} else { // A [K,M]
				gemm.Sgemm(false, false, K, N, M, alpha, a, ac, g32, N, 0, out, N)
			}
		} else { // B [N,K]: dB = α·Gᵀ·op(A)
			K := bc
			if !tA {
				gemm.Sgemm(true, false, N, K, M, alpha, g32, N, a, ac, 0, out, K)
			} else {
				gemm.Sgemm(true, true, N, K, M, alpha, g32, N, a, ac, 0, out, K)
			}
		}
		for i, v := range out {
			gb[i] += float64(v)
		}
	}
}
