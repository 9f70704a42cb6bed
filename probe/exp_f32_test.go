package probe

import (
	"math"
	"testing"
)

// expNonPos agrees with Go's math.Exp (the reference) to 1e-15 relative on
// a dense sweep of [−720, 0], and rounds to the same float32 on a sweep of
// every 97th float32 in [−104, 0] (softmax's range: e^x underflows float32 below −104).
func TestExpNonPosMatchesMathExp(t *testing.T) {
	for i := 0; i <= 720000; i++ {
		x := -float64(i) / 1000
		got, want := expNonPos(x), math.Exp(x)
		if want < 1e-300 {
			if got > 1e-300 {
				t.Fatalf("exp(%g) = %g, want about %g", x, got, want)
			}
			continue
		}
		if math.Abs(got-want) > 1e-15*want {
			t.Fatalf("exp(%g) = %.17g, want %.17g", x, got, want)
		}
	}
	bad := 0
	for b := uint32(0x80000000); b <= math.Float32bits(-104); b += 97 {
		x := float64(math.Float32frombits(b))
		if float32(expNonPos(x)) != float32(math.Exp(x)) {
			bad++
		}
	}
	if bad > 0 {
		t.Fatalf("%d float32 results differ from math.Exp's", bad)
	}
	if v := expNonPos(math.NaN()); v == v {
		t.Fatal("NaN must stay NaN")
	}
	if expNonPos(math.Inf(-1)) != 0 || expNonPos(0) != 1 {
		t.Fatal("exp(−Inf) must be 0 and exp(0) 1")
	}
}
