package probe

import "math"

// sigmoid32AVX512 sets dst[i] = 1/(1 + e^−src[i]) for i < n in float32
// lanes, sixteen at a time (act32_amd64.s), n any length; with mul != nil
// also mul[i] = src[i]·dst[i] (SiLU), the float32 product the Mul kernel
// computes, its operands in the Mul node's order (order bit 0: sigmoid
// first); with order bit 1 the sigmoid is not kept: dst is then a scratch
// of 16 values that every step overwrites.
//
// Method: E = e^−|x| = 2^k·(1 + q), q = e^r − 1 by its Taylor series to r⁸
// (the first omitted term, r⁹/9! ≤ 2e-10 for |r| ≤ ln2/2, is 0.003 float32
// ulp of 1), and 1/(1 + E) by a reciprocal estimate refined once by Newton
// on the exactly split sum 1 + E; for x < 0 the result is E/(1 + E) =
// 2^k·(1 + q)·d, one fused multiply-add and an exact scaling (rounding once
// more only where it is subnormal). Rounding errors: q about 0.2 ulp of
// 1, 1 + q half an ulp, d half an ulp plus 2^−28 relative, the last step
// half an ulp: at most 2 float32 ulp from the correctly rounded sigmoid,
// the tolerance TestActivationsMatchMath applies to it.
//
//go:noescape
func sigmoid32AVX512(dst, src *float32, n int, table *[16]float32, mul *float32, order int)

// sigmoid32Table: log2 e, ln2 split as 0.693145751953125 (few bits: k·ln2hi
// is exact for |k| < 2^15) plus the float32 remainder, the clamp −150
// (e^−150 is below half the smallest subnormal), 1/2!…1/8!, 1, the sign bit.
var sigmoid32Table = func() (t [16]float32) {
	t[0] = math.Log2E
	t[1] = 0.693145751953125
	t[2] = float32(math.Ln2 - 0.693145751953125)
	t[3] = -150
	f := 1.0
	for n := 2; n <= 8; n++ {
		f *= float64(n)
		t[2+n] = float32(1 / f)
	}
	t[11] = 1
	t[12] = math.Float32frombits(1 << 31)
	return t
}()
