package probe

import "golang.org/x/sys/cpu"

// Vector row kernels of dw3Row (conv_dw_amd64.s). Each writes the first n
// outputs (n a multiple of the vector width) of
// dst[j] = wb[9] + Σ_{k,t<3} wb[3k+t] · r_k[j·s + t], s = 1 or 2, adding
// the taps in that order with fused multiply-adds.

//go:noescape
func dw3s1AVX512(dst, r0, r1, r2 *float32, wb *[10]float32, n int)

//go:noescape
func dw3s2AVX512(dst, r0, r1, r2 *float32, wb *[10]float32, n int)

//go:noescape
func dw3s1AVX2(dst, r0, r1, r2 *float32, wb *[10]float32, n int)

//go:noescape
func dw3s2AVX2(dst, r0, r1, r2 *float32, wb *[10]float32, n int)

// dwVecLevel picks the row kernel: 2 AVX-512, 1 AVX2+FMA, 0 none (Go only).
// Tests lower it to check each level against dw3RowGo.
var dwVecLevel = func() int {
	switch {
	case cpu.X86.HasAVX512F:
		return 2
	case cpu.X86.HasAVX2 && cpu.X86.HasFMA:
		return 1
	}
	return 0
}()

// dw3RowVec runs the widest available kernel over the whole vectors of dst
// and returns how many outputs it wrote. The blocks read r_k up to index
// j·s + s·(width−1) + 2 for their last j, inside dw3Row's required length.
func dw3RowVec(dst, r0, r1, r2 []float32, wk *[9]float32, bias float32, sw int) int {
	width := 8
	if dwVecLevel == 2 {
		width = 16
	}
	n := len(dst) &^ (width - 1)
	if dwVecLevel == 0 || n == 0 || sw != 1 && sw != 2 {
		return 0
	}
	var wb [10]float32
	copy(wb[:9], wk[:])
	wb[9] = bias
	switch {
	case dwVecLevel == 2 && sw == 1:
		dw3s1AVX512(&dst[0], &r0[0], &r1[0], &r2[0], &wb, n)
	case dwVecLevel == 2:
		dw3s2AVX512(&dst[0], &r0[0], &r1[0], &r2[0], &wb, n)
	case sw == 1:
		dw3s1AVX2(&dst[0], &r0[0], &r1[0], &r2[0], &wb, n)
	default:
		dw3s2AVX2(&dst[0], &r0[0], &r1[0], &r2[0], &wb, n)
	}
	return n
}
