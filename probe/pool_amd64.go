package probe

import "golang.org/x/sys/cpu"

// Max-pooling vector kernels (pool_amd64.s), with Go's max semantics.

// maxRowsAVX512 sets dst[i] = max(a[i], b[i]) for i < n, n a multiple of 16.
//
//go:noescape
func maxRowsAVX512(dst, a, b *float32, n int)

// maxCols3s2AVX512 sets dst[o] = max(src[2o−1], src[2o], src[2o+1]) for
// o < n, n a multiple of 16; it reads src[−1] through src[2n−1].
//
//go:noescape
func maxCols3s2AVX512(dst, src *float32, n int)

// havePoolVec is true where the kernels run (tests clear it to compare
// with the Go loops).
var havePoolVec = cpu.X86.HasAVX512F

// maxRowsVec is maxRows' vector part: it returns how many leading values
// it did (a multiple of 16, 0 without AVX-512).
func maxRowsVec(dst, a, b []float32) int {
	n := len(dst) &^ 15
	if !havePoolVec || n == 0 {
		return 0
	}
	_, _ = a[n-1], b[n-1]
	maxRowsAVX512(&dst[0], &a[0], &b[0], n)
	return n
}

// maxCols2s2AVX512 sets dst[o] = max(src[2o], src[2o+1]) for o < n, n a
// multiple of 16.
//
//go:noescape
func maxCols2s2AVX512(dst, src *float32, n int)

// maxCols2s2Whole sets dst[o] = max(src[2o], src[2o+1]) for every o <
// len(dst) (a multiple of 16); src must hold 2·len(dst) values. Only where
// havePoolVec.
func maxCols2s2Whole(dst, src []float32) {
	n := len(dst)
	if n == 0 {
		return
	}
	_ = src[2*n-1]
	maxCols2s2AVX512(&dst[0], &src[0], n)
}

// maxCols3s2Whole sets dst[o] = max(src[2o−1], src[2o], src[2o+1]) for
// every o < len(dst) (a multiple of 16), reading src[−1] through
// src[2·len(dst)−1]: src is a subslice whose element −1 exists, and must
// hold 2·len(dst) values. Only where havePoolVec.
func maxCols3s2Whole(dst, src []float32) {
	n := len(dst)
	if n == 0 {
		return
	}
	_ = src[2*n-1]
	maxCols3s2AVX512(&dst[0], &src[0], n)
}

// sum8AVX512 adds x[8i+j] to acc[j] for i < n/8, in order (n a multiple
// of 8): the same float64 additions as the Go loop it replaces.
//
//go:noescape
func sum8AVX512(x *float32, n int, acc *[8]float64)

// sum8Vec is the vector part of poolGlobalAvgF32's sum: it returns how
// many leading values of x it added (a multiple of 8, 0 without AVX-512).
func sum8Vec(x []float32, acc *[8]float64) int {
	n := len(x) &^ 7
	if !havePoolVec || n == 0 {
		return 0
	}
	sum8AVX512(&x[0], n, acc)
	return n
}
