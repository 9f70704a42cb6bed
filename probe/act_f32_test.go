package probe

import (
	"fmt"
	"math"
	"testing"
)

// The float32 activations against Go's float64 math library (the
// reference: float32(g(float64(x))) with g the operator's formula in
// math.Exp/Expm1/Tanh/Log1p). Every float32 bit pattern with a stride of 251
// (17 million values, both signs, subnormals, ±Inf and NaN included) is
// checked on the widest vector path the CPU has, and every 1021st on each
// narrower one (AVX2, then the Go path).
//
// Tolerance: 1 float32 ulp, counted on the ordered bit patterns, and at
// most one value in 10^5 off by that ulp. Why: the vector kernel evaluates
// the same formula in float64 with a relative error of a few 1e-16
// (actAVX512), so its float32 rounding can differ from the reference's only
// when the exact value lies within that distance of a float32 rounding
// boundary — then the two are the adjacent float32 values around it. A
// fraction of about 2^24 · 1e-15 ≈ 2e-8 of the values can fall there; the
// 1e-5 bound leaves room and still fails a kernel that is off in general.
// NaN must stay NaN; ±0 compare equal (the formulas differ in the sign of
// zero only where the operator's definition does not fix it).
//
// Sigmoid at the AVX-512 level runs in float32 lanes (sigmoid32AVX512):
// tolerance 2 ulp, its error bound (a few half-ulp roundings, see
// act32_amd64.go), and at most 2% of the values off at all (measured: none
// off by 2, 0.90% off by 1 — a kernel without the compensated 1 + E or the
// Newton step is off by 1 on a large share of the values or by more than 2).

type actCase struct {
	name string
	k    func(dst, src []float32)
	ref  func(float64) float64
}

func actCases() []actCase {
	selu := eluLike(1.05070102214813232421875, 1.05070102214813232421875*1.67326319217681884765625, 1)
	return []actCase{
		{"Sigmoid", sigmoidF32, elemSigmoid},
		{"Tanh", tanhF32, math.Tanh},
		{"HardSwish", hardSwishF32, elemHardSwish},
		{"HardSigmoid", actF32(actHardSigmoid, [3]float64{0.2, 0.5}, hardSigmoid(0.2, 0.5)), func(x float64) float64 { return math.Max(0, math.Min(1, 0.2*x+0.5)) }},
		{"HardSigmoid(1/6)", actF32(actHardSigmoid, [3]float64{float64(float32(1.0 / 6)), 0.5}, hardSigmoid(float64(float32(1.0/6)), 0.5)), hardSigmoid(float64(float32(1.0/6)), 0.5)},
		{"Elu", actF32(actElu, [3]float64{1, 1, 1}, eluLike(1, 1, 1)), func(x float64) float64 {
			if x < 0 {
				return math.Expm1(x)
			}
			return x
		}},
		{"Selu", actF32(actElu, [3]float64{1.05070102214813232421875, 1.05070102214813232421875 * 1.67326319217681884765625, 1}, selu), selu},
		{"Celu(2)", actF32(actElu, [3]float64{1, 2, 2}, eluLike(1, 2, 2)), func(x float64) float64 {
			return math.Max(0, x) + math.Min(0, 2*math.Expm1(x/2))
		}},
		{"Exp", expF32, math.Exp},
		{"Mish", mishF32, func(x float64) float64 { return x * math.Tanh(math.Log1p(math.Exp(x))) }},
		// ln(1 + e^x) = max(x, 0) + ln(1 + e^−|x|), which does not overflow for large x
		{"Softplus", softplusF32, func(x float64) float64 { return math.Max(x, 0) + math.Log1p(math.Exp(-math.Abs(x))) }},
		{"Sqrt", sqrtF32, math.Sqrt},
		{"Reciprocal", reciprocalF32, func(x float64) float64 { return 1 / x }},
		{"Log", logF32, math.Log},
	}
}

// ulpDiff is the distance of a and b in float32 steps (0 for ±0 or two NaNs).
func ulpDiff(a, b float32) uint32 {
	if a != a || b != b {
		if a != a && b != b {
			return 0
		}
		return math.MaxUint32
	}
	if a == b {
		return 0
	}
	ord := func(v float32) int64 {
		u := int64(math.Float32bits(v))
		if u&(1<<31) != 0 {
			return -(u &^ (1 << 31))
		}
		return u
	}
	d := ord(a) - ord(b)
	if d < 0 {
		d = -d
	}
	return uint32(min(d, math.MaxUint32))
}

// actFloat32Lanes reports whether activation name runs in float32 lanes at
// the current vector level (the others evaluate their formula in float64).
func actFloat32Lanes(name string) bool {
	return actVecLevel == 2 && name == "Sigmoid"
}

func TestActivationsMatchMath(t *testing.T) {
	saved := actVecLevel
	defer func() { actVecLevel = saved }()
	for level := saved; level >= 0; level-- {
		actVecLevel = level
		stride := uint64(251)
		if level < saved {
			stride = 1021
		}
		activationSweep(t, stride)
	}
}

func activationSweep(t *testing.T, stride uint64) {
	x := make([]float32, 0, (1<<32)/stride+1)
	for b := uint64(0); b < 1<<32; b += stride {
		x = append(x, math.Float32frombits(uint32(b)))
	}
	got := make([]float32, len(x))
	for _, tc := range actCases() {
		tc.k(got, x)
		off, bad := 0, 0
		maxUlp, maxOff := uint32(1), len(x)/100000
		if actFloat32Lanes(tc.name) {
			maxUlp, maxOff = 2, len(x)/50
		}
		for i, v := range x {
			w := float32(tc.ref(float64(v)))
			switch d := ulpDiff(got[i], w); {
			case d == 0:
			case d <= maxUlp:
				off++
			default:
				if bad < 5 {
					t.Errorf("%s(%g) = %g, reference %g (%d ulp)", tc.name, v, got[i], w, d)
				}
				bad++
			}
		}
		if bad > 0 || off > maxOff {
			t.Errorf("%s (vector level %d): %d values more than %d ulp off, %d off by up to %[4]d ulp of %d", tc.name, actVecLevel, bad, maxUlp, off, len(x))
		} else {
			t.Logf("%s: %d of %d values off by up to %d ulp (vector level %d)", tc.name, off, len(x), maxUlp, actVecLevel)
		}
	}
}

// The Go path alone (what runs without AVX-512) is the reference itself.
func TestActivationsGoPath(t *testing.T) {
	saved := actVecLevel
	defer func() { actVecLevel = saved }()
	actVecLevel = 0
	x := []float32{-100, -3, -1, -0.5, 0, 0.25, 1, 3, 100, float32(math.Inf(1))}
	got := make([]float32, len(x))
	for _, tc := range actCases() {
		tc.k(got, x)
		for i, v := range x {
			if w := float32(tc.ref(float64(v))); ulpDiff(got[i], w) != 0 {
				t.Errorf("%s(%g) = %g without vectors, reference %g", tc.name, v, got[i], w)
			}
		}
	}
}

// BenchmarkActivations times each activation at every vector level this CPU
// has (2 AVX-512, 1 AVX2, 0 the Go reference loop) on 64K values.
func BenchmarkActivations(b *testing.B) {
	x := make([]float32, 1<<16)
	for i := range x {
		x[i] = float32(i-len(x)/2) / 4096
	}
	y := make([]float32, len(x))
	saved := actVecLevel
	defer func() { actVecLevel = saved }()
	for _, tc := range actCases() {
		for level := saved; level >= 0; level-- {
			b.Run(fmt.Sprintf("%s/level%d", tc.name, level), func(b *testing.B) {
				actVecLevel = level
				b.SetBytes(int64(4 * len(x)))
				for b.Loop() {
					tc.k(y, x)
				}
			})
		}
	}
}

// A value's activation does not depend on where the slice holding it starts
// (the vector kernel computes the partial last group too): every span of a
// random vector gives the values of the whole-vector call, bit for bit, at
// every vector level.
func TestActivationsIndependentOfSpan(t *testing.T) {
	saved := actVecLevel
	defer func() { actVecLevel = saved }()
	x := make([]float32, 101)
	for i := range x {
		x[i] = float32(i-50) / 7
	}
	x[13] = float32(math.NaN())
	for level := saved; level >= 0; level-- {
		actVecLevel = level
		for _, tc := range actCases() {
			whole := make([]float32, len(x))
			tc.k(whole, x)
			for lo := 0; lo < 12; lo++ {
				for hi := lo; hi <= len(x); hi += 1 + hi%5 {
					part := make([]float32, hi-lo)
					tc.k(part, x[lo:hi])
					for j, v := range part {
						if math.Float32bits(v) != math.Float32bits(whole[lo+j]) {
							t.Fatalf("level %d %s: x[%d] in span [%d, %d) = %g, whole call %g", level, tc.name, lo+j, lo, hi, v, whole[lo+j])
						}
					}
				}
			}
		}
	}
}

// BenchmarkSiLU times the fused SiLU's two outputs (sigmoid and x·sigmoid)
// on a 112×112 plane (in cache, as a Conv applies it plane by plane): one
// pass (siluVec, where it runs) against Sigmoid then Mul.
func BenchmarkSiLU(b *testing.B) {
	x := make([]float32, 112*112)
	for i := range x {
		x[i] = float32(i-len(x)/2) / 1024
	}
	s, y := make([]float32, len(x)), make([]float32, len(x))
	b.Run("fused", func(b *testing.B) {
		b.SetBytes(int64(4 * len(x)))
		for b.Loop() {
			if !siluVec(s, y, x, false) {
				b.Skip("no one-pass kernel")
			}
		}
	})
	b.Run("two-pass", func(b *testing.B) {
		b.SetBytes(int64(4 * len(x)))
		for b.Loop() {
			sigmoidF32(s, x)
			vvF32(mulT, y, x, s)
		}
	})
}
