package probe

import "golang.org/x/sys/cpu"

// erfAVX512 computes erf of src into dst eight values at a time (see
// erf_amd64.s and erfVecTable): it writes dst[i] for i below its result, a
// multiple of 8, stopping before the first group of 8 with a value outside
// the table (|x| ≥ 4 or NaN).
//
//go:noescape
func erfAVX512(dst, src *float32, n int, table *float64) int

// erfVecTerms is the number of series terms of the vector erf (h¹…h¹⁴).
const erfVecTerms = 14

// erfVecTable[n][k] is the coefficient of hⁿ in erf(c + h) about c = k/4,
// k < 16 (n = 0: erf(c)), from the series in erf_f32.go. The centres are a
// quarter apart so that a coefficient is one two-register lookup; x goes to
// the nearest centre, |h| ≤ 1/8, where the first omitted terms (h¹⁵…h¹⁷)
// are below 3.1e-18 relative to erf(x) at every centre (summed at
// h = ±1/16, ±1/8), far under float32's half ulp, so the result rounds as
// math.Erf's does but for values within about 1e-16 of a rounding boundary
// (TestErf32MatchesMathErf checks the sweep). Before, x went to the centre
// below with h < 1/4, which took terms to h²⁰ in one chain of 20
// multiply-adds; now two chains in h² of 7 and 6 (BenchmarkErf).
var erfVecTable = func() (t [erfVecTerms + 1][16]float64) {
	var coef [erfVecTerms + 1]float64
	for k := range 16 {
		erfSeries(coef[:], float64(k)/4)
		for n, v := range coef {
			t[n][k] = v
		}
	}
	return t
}()

// haveErfVec is true where erfAVX512 runs (tests clear it to compare with
// the Go loop).
var haveErfVec = cpu.X86.HasAVX512F && cpu.X86.HasAVX512DQ

// erfVec runs erfAVX512 over src into dst and returns how many leading
// values it wrote (0 without AVX-512).
func erfVec(dst, src []float32) int {
	n := min(len(dst), len(src)) &^ 7
	if !haveErfVec || n == 0 {
		return 0
	}
	return erfAVX512(&dst[0], &src[0], n, &erfVecTable[0][0])
}
