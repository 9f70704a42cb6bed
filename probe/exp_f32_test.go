package probe

import (
	"math"
	"math/rand/v2"
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

// The AVX-512 softmax exponentials are expNonPos's, bit for bit, on rows
// holding −Inf, NaN, arguments below −708 and the row maximum itself; their
// sum matches the sequential float64 sum to rounding.
func TestSoftmaxExpVecMatchesExpNonPos(t *testing.T) {
	if !haveSoftmaxVec {
		t.Skip("no AVX-512 here")
	}
	r := rand.New(rand.NewPCG(7, 7))
	for trial := 0; trial < 300; trial++ {
		x := make([]float32, 8+r.IntN(200))
		for i := range x {
			switch r.IntN(30) {
			case 0:
				x[i] = float32(math.Inf(-1))
			case 1:
				x[i] = float32(math.NaN())
			case 2:
				x[i] = -800 - float32(r.Float64()*100)
			default:
				x[i] = float32(r.NormFloat64() * 8)
			}
		}
		mx := float32(math.Inf(-1))
		for _, v := range x {
			if v > mx {
				mx = v
			}
		}
		y := make([]float32, len(x))
		n, s := softmaxExpVec(y, x, mx)
		if n != len(x)&^7 {
			t.Fatalf("did %d of %d", n, len(x))
		}
		var want float64
		for i := 0; i < n; i++ {
			e := expNonPos(float64(x[i] - mx))
			want += e
			if g, w := y[i], float32(e); math.Float32bits(g) != math.Float32bits(w) && !(g != g && w != w) {
				t.Fatalf("exp(%g − %g) = %g, expNonPos gives %g", x[i], mx, g, w)
			}
		}
		if !(math.Abs(s-want) <= 1e-14*math.Abs(want)) && !(s != s && want != want) {
			t.Fatalf("sum %g, sequential %g", s, want)
		}
	}
}
