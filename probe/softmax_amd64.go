package probe

import "golang.org/x/sys/cpu"

//go:noescape
func softmaxExpAVX512(y, x *float32, n int, mx float32, c *[11]float64, table *[32]float64) float64

//go:noescape
func softmaxMaxAVX512(x *float32, n int, m float32) float32

//go:noescape
func softmaxScaleAVX512(y *float32, n int, r float64)

// haveSoftmaxVec is true where softmaxExpAVX512 runs (tests clear it).
var haveSoftmaxVec = cpu.X86.HasAVX512F && cpu.X86.HasAVX512DQ

// expConsts are expNonPos's constants in the order softmaxExpAVX512 reads them.
var expConsts = [11]float64{expInvStep, 0.5, expStepHi, expStepLo, expMinArg, 1.0 / 720, 1.0 / 120, 1.0 / 24, 1.0 / 6, 1.0 / 2, 1}

// softmaxExpVec sets y[i] = float32(expNonPos(float64(x[i] − mx))) for the
// leading multiple of 8 of x and returns how many it did and their sum
// (8 float64 lanes, then added pairwise); 0, 0 without AVX-512.
func softmaxExpVec(y, x []float32, mx float32) (int, float64) {
	n := len(x) &^ 7
	if !haveSoftmaxVec || n == 0 {
		return 0, 0
	}
	_ = y[n-1]
	return n, softmaxExpAVX512(&y[0], &x[0], n, mx, &expConsts, &expTable)
}

// softmaxMaxVec folds the leading multiple of 16 of x into the running
// maximum m (m ← x_i when x_i > m, so NaNs are skipped) and returns how
// many values it did and the new m; 0, m without AVX-512.
func softmaxMaxVec(x []float32, m float32) (int, float32) {
	n := len(x) &^ 15
	if !haveSoftmaxVec || n == 0 {
		return 0, m
	}
	return n, softmaxMaxAVX512(&x[0], n, m)
}

// softmaxScaleVec sets y[i] = float32(float64(y[i])·r) for the leading
// multiple of 8 of y and returns how many it did (0 without AVX-512).
func softmaxScaleVec(y []float32, r float64) int {
	n := len(y) &^ 7
	if !haveSoftmaxVec || n == 0 {
		return 0
	}
	softmaxScaleAVX512(&y[0], n, r)
	return n
}
