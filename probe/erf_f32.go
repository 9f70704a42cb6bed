package probe

import "math"

// Fast float32 erf by local Taylor series of known error.
//
// erf'(x) = (2/√π)·e^{−x²} and the n-th derivative of e^{−x²} is
// (−1)ⁿ·Hₙ(x)·e^{−x²} (Hₙ the physicists' Hermite polynomials), so around a
// centre c
//
//	erf(c + h) = erf(c) + (2/√π)·e^{−c²} · Σₙ (−1)ⁿ·Hₙ(c)·h^{n+1}/(n+1)!.
//
// The centres are c = k/16 on [0, 4]; with |h| ≤ 1/32 the series is cut
// after h⁸ (n = 7), where the next term is below 1e-15 relative to erf for
// every centre, far under float32's half ulp (≈3e-8 relative), so the
// float32 result is float32(erf(x)) except when the exact value lies
// within ≈1e-15 of a rounding boundary (tested against math.Erf: never more
// than one ulp apart). For x ≥ 4, 1 − erf(x) < 1.6e-8 rounds to 1. The
// coefficients come from math.Erf, math.Exp and the Hermite recurrence
// H₀ = 1, H₁ = 2c, Hₙ₊₁ = 2c·Hₙ − 2n·Hₙ₋₁, once at start-up.

const (
	erfSteps = 16 // centres per unit
	erfMax   = 4  // erf(x) rounds to 1 in float32 from here on
	erfTerms = 8  // h¹ … h⁸
)

// erfTable[k] = erf(c), then the coefficient of h^{n+1} for n = 0…7, c = k/16.
var erfTable = func() (t [erfSteps*erfMax + 1][erfTerms + 1]float64) {
	for k := range t {
		erfSeries(t[k][:], float64(k)/erfSteps)
	}
	return t
}()

// erfSeries sets coef[0] = erf(c) and coef[n+1] to the coefficient of
// h^{n+1} in erf(c + h), for every further element of coef (the series
// above, with the Hermite recurrence).
func erfSeries(coef []float64, c float64) {
	coef[0] = math.Erf(c)
	scale := 2 / math.Sqrt(math.Pi) * math.Exp(-c*c)
	hPrev, h := 0.0, 1.0 // H₋₁ (unused), H₀
	fact := 1.0          // (n+1)!
	sign := 1.0
	for n := 0; n+1 < len(coef); n++ {
		fact *= float64(n + 1)
		coef[n+1] = sign * scale * h / fact
		h, hPrev = 2*c*h-2*float64(n)*hPrev, h
		sign = -sign
	}
}

// erf32 is erf of one float32 value (see above); NaN stays NaN.
func erf32(v float32) float32 {
	x := float64(v)
	a := math.Abs(x)
	if !(a < erfMax) { // also NaN
		if a != a {
			return v
		}
		return float32(math.Copysign(1, x))
	}
	return float32(math.Copysign(erfPoly(a), x))
}

// erfPoly is erf(a) for 0 ≤ a < erfMax.
func erfPoly(a float64) float64 {
	k := int(a*erfSteps + 0.5)
	h := a - float64(k)/erfSteps
	c := &erfTable[k]
	s := c[8]
	s = s*h + c[7]
	s = s*h + c[6]
	s = s*h + c[5]
	s = s*h + c[4]
	s = s*h + c[3]
	s = s*h + c[2]
	s = s*h + c[1]
	return c[0] + s*h
}

// erfF32 evaluates four values at a time when all four are in the table's
// range, so their independent chains of multiply-adds overlap.
func erfF32(dst, src []float32) {
	dst = dst[:len(src)]
	if !haveErfVec {
		erfF32Go(dst, src)
		return
	}
	for i := 0; i < len(src); {
		// eight at a time in vector lanes up to a group that leaves the
		// table (or the tail), then that group in Go
		i += erfVec(dst[i:], src[i:])
		j := min(i+8, len(src))
		erfF32Go(dst[i:j], src[i:j])
		i = j
	}
}

// erfF32Go is erfF32 in Go: four at a time when all four are in the table.
func erfF32Go(dst, src []float32) {
	i := 0
	for ; i+4 <= len(src); i += 4 {
		s := src[i : i+4 : i+4]
		x0, x1, x2, x3 := float64(s[0]), float64(s[1]), float64(s[2]), float64(s[3])
		a0, a1, a2, a3 := math.Abs(x0), math.Abs(x1), math.Abs(x2), math.Abs(x3)
		if !(a0 < erfMax && a1 < erfMax && a2 < erfMax && a3 < erfMax) {
			d := dst[i : i+4 : i+4]
			d[0], d[1], d[2], d[3] = erf32(s[0]), erf32(s[1]), erf32(s[2]), erf32(s[3])
			continue
		}
		k0, k1, k2, k3 := int(a0*erfSteps+0.5), int(a1*erfSteps+0.5), int(a2*erfSteps+0.5), int(a3*erfSteps+0.5)
		h0, h1, h2, h3 := a0-float64(k0)/erfSteps, a1-float64(k1)/erfSteps, a2-float64(k2)/erfSteps, a3-float64(k3)/erfSteps
		c0, c1, c2, c3 := &erfTable[k0], &erfTable[k1], &erfTable[k2], &erfTable[k3]
		s0, s1, s2, s3 := c0[8], c1[8], c2[8], c3[8]
		for n := 7; n >= 1; n-- {
			s0, s1, s2, s3 = s0*h0+c0[n], s1*h1+c1[n], s2*h2+c2[n], s3*h3+c3[n]
		}
		d := dst[i : i+4 : i+4]
		d[0] = float32(math.Copysign(c0[0]+s0*h0, x0))
		d[1] = float32(math.Copysign(c1[0]+s1*h1, x1))
		d[2] = float32(math.Copysign(c2[0]+s2*h2, x2))
		d[3] = float32(math.Copysign(c3[0]+s3*h3, x3))
	}
	for ; i < len(src); i++ {
		dst[i] = erf32(src[i])
	}
}
