package probe

import "math"

// Float32 activations with a vector kernel (act_amd64.s, AVX-512) for whole
// groups of 8 and the float64 formula of the operator (the reference, and
// the only path elsewhere) for the rest. Each computes float32(g(float64(x)))
// for its formula g, to within one float32 ulp (see actAVX512).

// actOp selects the vector kernel's formula; the order is act_amd64.s's.
type actOp int

const (
	actSigmoid     actOp = iota // 1/(1 + e^−x)
	actTanh                     // sign(x)·m/(m + 2), m = e^2|x| − 1
	actElu                      // p·x for x > 0, q·(e^(x/d) − 1) otherwise
	actHardSigmoid              // max(0, min(1, p·x + q))
	actHardSwish                // x·max(0, min(1, x/6 + 1/2))
	actExp                      // e^x
	actMish                     // x·tanh(ln(1 + e^x)) = x·n/(n + 2), n = e^x·(e^x + 2)
)

// actF32 returns the float32 slice kernel of op with parameters p. Where a
// vector kernel runs, it computes every value, the last partial group
// through a small buffer, so that a value does not depend on where a slice
// starts (a Conv applies the kernel to other spans than the activation's own
// step, and the hook must see the same values either way); elsewhere every
// value comes from ref.
func actF32(op actOp, p [3]float64, ref func(float64) float64) func(dst, src []float32) {
	return func(dst, src []float32) {
		dst = dst[:len(src)]
		i := actVec(dst, src, op, &p)
		if i < len(src) && actVecLevel > 0 {
			var in, out [8]float32
			n := copy(in[:], src[i:])
			if actVec(out[:], in[:], op, &p) == len(in) {
				copy(dst[i:], out[:n])
				return
			}
		}
		for ; i < len(src); i++ {
			dst[i] = float32(ref(float64(src[i])))
		}
	}
}

// eluLike is y = p·x for x > 0, q·(e^(x/d) − 1) otherwise: Elu (p = 1, q = α,
// d = 1), Selu (p = γ, q = γ·α, d = 1), Celu with α > 0 (p = 1, q = α, d = α).
func eluLike(p, q, d float64) func(float64) float64 {
	return func(x float64) float64 {
		if x > 0 {
			return p * x
		}
		return q * math.Expm1(x/d)
	}
}

// hardSigmoid is max(0, min(1, α·x + β)).
func hardSigmoid(a, b float64) func(float64) float64 {
	return func(x float64) float64 { return math.Max(0, math.Min(1, a*x+b)) }
}

// elemMish is x·tanh(softplus(x)).
func elemMish(x float64) float64 { return x * math.Tanh(elemSoftplus(x)) }

var (
	sigmoidF32   = actF32(actSigmoid, [3]float64{}, elemSigmoid)
	tanhF32      = actF32(actTanh, [3]float64{}, math.Tanh)
	hardSwishF32 = actF32(actHardSwish, [3]float64{}, elemHardSwish)
	expF32       = actF32(actExp, [3]float64{}, math.Exp)
	mishF32      = actF32(actMish, [3]float64{}, elemMish)
)

// sqrtF32 is √x rounded once to float32: the float32 square root equals
// float32(math.Sqrt(float64(x))), double rounding through a format of at
// least 2·24 + 2 bits being innocuous for √ (Figueroa, "When is double
// rounding innocuous?", 1995; value from memory).
func sqrtF32(dst, src []float32) {
	dst = dst[:len(src)]
	for i, v := range src {
		dst[i] = float32(math.Sqrt(float64(v)))
	}
}

// reciprocalF32 is 1/x in float32, equal to float32(1/float64(x)) for the
// same reason as sqrtF32 (division).
func reciprocalF32(dst, src []float32) {
	dst = dst[:len(src)]
	for i, v := range src {
		dst[i] = 1 / v
	}
}

// logF32 is float32(ln x) in a plain loop (no per-value closure call).
func logF32(dst, src []float32) {
	dst = dst[:len(src)]
	for i, v := range src {
		dst[i] = float32(math.Log(float64(v)))
	}
}

// softplusF32 is float32(softplus(x)) in a plain loop.
func softplusF32(dst, src []float32) {
	dst = dst[:len(src)]
	for i, v := range src {
		dst[i] = float32(elemSoftplus(float64(v)))
	}
}
