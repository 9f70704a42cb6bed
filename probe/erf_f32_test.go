package probe

import (
	"math"
	"testing"
)

// erf32 rounds to the same float32 as Go's float64 math.Erf (the reference)
// on a sweep of bit patterns covering [−4.5, 4.5] (every 127th float32, both
// signs, subnormals included); beyond 4 both are ±1.
func TestErf32MatchesMathErf(t *testing.T) {
	bad := 0
	var x []float32
	for b := uint32(0); b < 0x40900000; b += 127 {
		for _, sign := range []uint32{0, 1 << 31} {
			x = append(x, math.Float32frombits(b|sign))
		}
	}
	got := make([]float32, len(x))
	erfF32(got, x) // the four-at-a-time path, and erf32 where a group leaves the table
	for i, v := range x {
		if g, w := got[i], float32(math.Erf(float64(v))); g != w {
			if bad < 5 {
				t.Errorf("erf32(%g) = %g, math.Erf gives %g", v, g, w)
			}
			bad++
		}
	}
	if bad > 0 {
		t.Fatalf("%d values differ", bad)
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
