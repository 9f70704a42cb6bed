package stats

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

// residObserveRef is residAcc.observe as first written (one row of the
// token-similarity sum per sweep, a branch for the maximum): the reference
// the faster observe must match bit for bit.
func residObserveRef(r *residAcc, t *tensor.Tensor) bool {
	x, ok := t.Data.([]float32)
	if !ok || t.Rank() < 2 || t.Shape[t.Rank()-1] != r.dim || r.dim == 0 {
		return false
	}
	D := r.dim
	var mx uint32
	var nan int64
	for i := 0; i+D <= len(x); i += D {
		for d, v := range x[i : i+D] {
			b := math.Float32bits(v) & 0x7fffffff
			if b >= 0x7f800000 {
				nan++
				continue
			}
			r.hist[b>>17]++
			if b > mx {
				mx = b
			}
			if b >= six32 {
				r.over6[d]++
			}
		}
	}
	for _, v := range x[len(x)/D*D:] {
		if math.Float32bits(v)&0x7fffffff >= 0x7f800000 {
			nan++
		}
	}
	r.n += int64(len(x)) - nan
	r.maxAbs = math.Max(r.maxAbs, float64(math.Float32frombits(mx)))
	r.positions += int64(len(x) / D)
	if t.Rank() == 3 {
		S := t.Shape[1]
		u := make([]float64, D)
		for b := 0; b < t.Shape[0]; b++ {
			clear(u)
			cnt := 0
			seq := x[b*S*D : (b+1)*S*D]
			for s := 0; s < S; s++ {
				row := seq[s*D : (s+1)*D]
				var q float64
				for _, v := range row {
					q += float64(v) * float64(v)
				}
				if q == 0 || math.IsNaN(q) || math.IsInf(q, 0) {
					continue
				}
				inv := 1 / math.Sqrt(q)
				for d, v := range row {
					u[d] += float64(v) * inv
				}
				cnt++
			}
			if cnt < 2 {
				continue
			}
			var uu float64
			for _, v := range u {
				uu += v * v
			}
			r.simSum += (uu - float64(cnt)) / float64(cnt*(cnt-1))
			r.simN++
		}
	}
	return true
}

// TestResidObserveMatchesRef: the residual-stream accumulator gives exactly
// (bit for bit) what the straightforward reference above gives, on data with
// zero rows, NaN/±Inf values, values ≥ 6 and sequence lengths that are not
// multiples of the four-row sweep. Source: regression against the reference.
func TestResidObserveMatchesRef(t *testing.T) {
	vec := residVec
	defer func() { residVec = vec }()
	for _, v := range []bool{vec, false} { // the vector kernel (where the CPU has it) and residGo alone
		residVec = v
		testResidObserveMatchesRef(t)
	}
}

func testResidObserveMatchesRef(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	for _, sh := range [][]int{{3, 7, 16}, {2, 128, 32}, {1, 5, 8}, {4, 1, 16}, {6, 24}, {2, 9, 3}, {2, 16, 256}, {3, 1}} {
		n := 1
		for _, d := range sh {
			n *= d
		}
		D := sh[len(sh)-1]
		x := make([]float32, n)
		for i := range x {
			x[i] = float32(rng.NormFloat64() * 3)
		}
		if n > 3*D {
			clear(x[D : 2*D]) // a zero token
			x[2*D+1] = float32(math.NaN())
			x[n-1] = float32(math.Inf(-1))
			x[0] = 1e30
		}
		if n > 100 {
			x[n/2+5] = float32(math.NaN()) // a group in the middle of the kernel's run
			x[n/2+40] = -7
		}
		got, want := newResidAcc(D), newResidAcc(D)
		for rep := 0; rep < 2; rep++ {
			tt := tensor.From(x, sh...)
			if a, b := got.observe(tt), residObserveRef(want, tt); a != b {
				t.Fatalf("vector %v %v: accepted %v, reference %v", residVec, sh, a, b)
			}
		}
		if got.maxAbs != want.maxAbs || got.n != want.n || got.positions != want.positions ||
			math.Float64bits(got.simSum) != math.Float64bits(want.simSum) || got.simN != want.simN {
			t.Fatalf("vector %v %v: got max %v n %d pos %d sim %v/%d, reference %v %d %d %v/%d", residVec, sh,
				got.maxAbs, got.n, got.positions, got.simSum, got.simN,
				want.maxAbs, want.n, want.positions, want.simSum, want.simN)
		}
		got.foldHist()
		for i := range got.hist {
			if got.hist[i] != want.hist[i] {
				t.Fatalf("vector %v %v: hist[%d] %d, reference %d", residVec, sh, i, got.hist[i], want.hist[i])
			}
		}
		for i := range got.over6 {
			if got.over6[i] != want.over6[i] {
				t.Fatalf("vector %v %v: over6[%d] %d, reference %d", residVec, sh, i, got.over6[i], want.over6[i])
			}
		}
	}
}
