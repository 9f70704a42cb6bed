package probe

import (
	"math"
	"math/rand/v2"
	"testing"
)

// erf32 rounds to the same float32 as Go's float64 math.Erf (the reference)
// on a sweep of bit patterns covering [−4.5, 4.5] (every 127th float32, both
// signs, subnormals included); beyond 4 both are ±1.
// Both paths are checked: the AVX-512 one (where the CPU has it) and the
// Go one.
func TestErf32MatchesMathErf(t *testing.T) {
	var x []float32
	for b := uint32(0); b < 0x40900000; b += 127 {
		for _, sign := range []uint32{0, 1 << 31} {
			x = append(x, math.Float32frombits(b|sign))
		}
	}
	saved := haveErfVec
	defer func() { haveErfVec = saved }()
	for _, vec := range []bool{saved, false} {
		haveErfVec = vec
		bad := 0
		got := make([]float32, len(x))
		erfF32(got, x) // and erf32 where a group leaves the table
		for i, v := range x {
			if g, w := got[i], float32(math.Erf(float64(v))); g != w {
				if bad < 5 {
					t.Errorf("vector=%v: erf32(%g) = %g, math.Erf gives %g", vec, v, g, w)
				}
				bad++
			}
		}
		if bad > 0 {
			t.Fatalf("vector=%v: %d values differ", vec, bad)
		}
	}
}

func BenchmarkErf(b *testing.B) {
	x := make([]float32, 1<<16)
	for i := range x {
		x[i] = float32(i-len(x)/2) / 8192
	}
	y := make([]float32, len(x))
	b.Run("erf32", func(b *testing.B) {
		b.SetBytes(int64(4 * len(x)))
		for b.Loop() {
			erfF32(y, x)
		}
	})
	b.Run("math.Erf", func(b *testing.B) {
		b.SetBytes(int64(4 * len(x)))
		for b.Loop() {
			for i, v := range x {
				y[i] = float32(math.Erf(float64(v)))
			}
		}
	})
}

// The AVX-512 path (its own table) and the Go path round to the same
// float32 on data that leaves the table now and then (|x| ≥ 4, ±Inf, NaN)
// between runs that stay in it, and ±0 keeps its sign.
func TestErfVecMatchesGo(t *testing.T) {
	if !haveErfVec {
		t.Skip("no AVX-512 here")
	}
	r := rand.New(rand.NewPCG(5, 6))
	for trial := 0; trial < 200; trial++ {
		x := make([]float32, r.IntN(300))
		for i := range x {
			switch r.IntN(40) {
			case 0:
				x[i] = float32(math.NaN())
			case 1:
				x[i] = float32(math.Inf(1 - 2*r.IntN(2)))
			case 2:
				x[i] = float32(r.NormFloat64() * 20)
			case 3:
				x[i] = float32(math.Copysign(0, -1))
			default:
				x[i] = float32(r.NormFloat64() * 1.5)
			}
		}
		got, want := make([]float32, len(x)), make([]float32, len(x))
		erfF32(got, x)
		erfF32Go(want, x)
		for i := range x {
			if math.Float32bits(got[i]) != math.Float32bits(want[i]) && !(got[i] != got[i] && want[i] != want[i]) {
				t.Fatalf("erf(%g): vector %g, Go %g", x[i], got[i], want[i])
			}
		}
	}
}

// BenchmarkErfGELU: erf on GELU's x/√2 for standard normal x, the values
// the encoders' Erf nodes see.
func BenchmarkErfGELU(b *testing.B) {
	r := rand.New(rand.NewPCG(1, 2))
	x := make([]float32, 1<<16)
	for i := range x {
		x[i] = float32(r.NormFloat64() / math.Sqrt2)
	}
	y := make([]float32, len(x))
	b.SetBytes(int64(4 * len(x)))
	for b.Loop() {
		erfF32(y, x)
	}
}
