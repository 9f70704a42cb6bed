package probe

import "math"

// Fast e^x for x ≤ 0 in float64 (softmax's exponentials of x − max).
//
// x = (32m + j)·ln2/32 + r with j ∈ [0, 32) and |r| ≤ ln2/64, so
//
//	e^x = 2^m · 2^(j/32) · e^r,
//
// 2^(j/32) from a table (math.Exp2, at start-up), e^r by its Taylor series
// to r⁶ (the next term is below 4e-18 relative), ln2/32 split into a
// 32-bit-exact high part and a low part (Cody and Waite's reduction) so
// that k·ln2/32 is exact for every k used. The relative error is below
// 1e-15, so rounded to float32 the result is float32(math.Exp(x)) except
// within 1e-15 of a rounding boundary (tested: never more than one ulp).

const (
	expInvStep = 32 / math.Ln2         // 1 / (ln2/32)
	expStepHi  = 0.021660848520696163  // high bits of ln2/32
	expStepLo  = 8.718021277417983e-10 // ln2/32 − expStepHi
	expMinArg  = -708.0                // below: e^x < 2^−1021, returned as 0
)

var expTable = func() (t [32]float64) {
	for j := range t {
		t[j] = math.Exp2(float64(j) / 32)
	}
	return
}()

// expNonPos is e^x for x ≤ 0 (see above); NaN stays NaN, x < −708 gives 0.
func expNonPos(x float64) float64 {
	if !(x >= expMinArg) {
		if x != x {
			return x
		}
		return 0
	}
	k := int(x*expInvStep - 0.5) // nearest for x ≤ 0 (conversion truncates toward 0)
	kf := float64(k)
	r := (x - kf*expStepHi) - kf*expStepLo
	p := 1 + r*(1+r*(1.0/2+r*(1.0/6+r*(1.0/24+r*(1.0/120+r*(1.0/720))))))
	return expTable[k&31] * p * math.Float64frombits(uint64((k>>5)+1023)<<52)
}
