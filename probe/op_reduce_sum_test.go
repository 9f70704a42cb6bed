package probe

import (
	"math"
	"math/rand"
	"testing"
)

// reduceSumF32 (no call per value) against reduceAcc with the sum closure it
// replaces, bit for bit (same additions in the same order), over random
// shapes and axis sets; the values themselves are checked by the ONNX
// conformance cases test_reduce_{sum,mean,log_sum}_* (TestConformance).
func TestReduceSumF32SameBits(t *testing.T) {
	r := rand.New(rand.NewSource(61))
	for trial := 0; trial < 200; trial++ {
		rank := 1 + r.Intn(4)
		shape := make([]int, rank)
		red := make([]bool, rank)
		kept := make([]int, rank)
		total, n := 1, 1
		for i := range shape {
			shape[i] = 1 + r.Intn(7)
			red[i] = r.Intn(2) == 0
			kept[i] = shape[i]
			if red[i] {
				kept[i] = 1
			}
			total *= shape[i]
			n *= kept[i]
		}
		x := make([]float32, total)
		for i := range x {
			x[i] = float32(r.NormFloat64() * math.Exp(4*r.NormFloat64()))
		}
		got, want := make([]float64, n), make([]float64, n)
		if !reduceSumF32(x, shape, kept, red, got, redMean) {
			t.Fatal("reduceSumF32 did not run on float32 data")
		}
		reduceAcc(x, shape, kept, red, want, func(a float64, v float32) float64 { return a + float64(v) })
		for i := range got {
			if math.Float64bits(got[i]) != math.Float64bits(want[i]) {
				t.Fatalf("trial %d shape %v red %v: out[%d] = %v, want %v", trial, shape, red, i, got[i], want[i])
			}
		}
	}
}
