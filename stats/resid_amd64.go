package stats

import "golang.org/x/sys/cpu"

// residAVX512 is residGo's loop over whole groups of 16 (resid_amd64.s):
// x starts at feature d0 of rows of D values (D a multiple of 16); it stops
// before the first group holding a NaN or ±Inf and returns the values done.
//
//go:noescape
func residAVX512(x []float32, D, d0 int, h0, h1 *int64, over *uint32, mx *uint32) int

var residVec = cpu.X86.HasAVX512F

// residKernel runs residAVX512 where the CPU has AVX-512 (0 values done
// otherwise).
func residKernel(x []float32, D, d0 int, h0, h1 []int64, over []uint32, mx *uint32) int {
	if !residVec || len(x) < 16 {
		return 0
	}
	_, _, _ = h0[absBins-1], h1[absBins-1], over[D-1]
	return residAVX512(x[:len(x)&^15], D, d0, &h0[0], &h1[0], &over[0], mx)
}

// addRows4AVX512 is the four-row sweep of residAcc.similarity over n
// features, n a multiple of 8 (resid_amd64.s).
//
//go:noescape
func addRows4AVX512(u *float64, n int, r0, r1, r2, r3 *float32, inv *[4]float64)

// addRows4 does u[d] += r0[d]·i0, then r1[d]·i1, r2[d]·i2, r3[d]·i3, in
// float64 (each product and sum rounded), by the vector kernel where the
// CPU has AVX-512.
func addRows4(u []float64, r0, r1, r2, r3 []float32, inv *[4]float64) {
	n := 0
	if residVec && len(u) >= 8 {
		n = len(u) &^ 7
		_, _, _, _ = r0[n-1], r1[n-1], r2[n-1], r3[n-1]
		addRows4AVX512(&u[0], n, &r0[0], &r1[0], &r2[0], &r3[0], inv)
	}
	addRows4Go(u[n:], r0[n:], r1[n:], r2[n:], r3[n:], inv)
}

// sumSquares16AVX512 is sumSquares for 16 rows of D values, D a multiple
// of 8 (resid_amd64.s).
//
//go:noescape
func sumSquares16AVX512(x *float32, D int, q *float64)

// sumSquares16 does sumSquares' first rows 16 at a time by the vector
// kernel where the CPU has AVX-512; it returns the rows done.
func sumSquares16(q []float64, x []float32, D int) int {
	if !residVec || D%8 != 0 || D == 0 {
		return 0
	}
	s := 0
	for ; s+16 <= len(q); s += 16 {
		_ = x[(s+16)*D-1]
		sumSquares16AVX512(&x[s*D], D, &q[s])
	}
	return s
}
