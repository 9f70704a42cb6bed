package stats

import (
	"math"
	"math/big"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

// The aligned grids nest: for any range and any wider range containing it,
// the wider range's grid (histGrid) has a bin width 2^E ≥ 2^e, and every
// bin of the narrower grid lies inside exactly one bin of the wider one
// (its left and right edges fall in the same wider bin), so moving counts
// onto the wider grid (regrid, MergeHist) splits none. Both windows start
// at multiples of (HistBins/2)·their width, so both sets of edges are
// multiples of the narrower width 2^e; checked here exactly in float64 on
// 20000 random pairs of ranges over 40 orders of magnitude.
func TestHistGridsNest(t *testing.T) {
	rng := rand.New(rand.NewSource(7))
	val := func() float64 {
		return (rng.Float64()*2 - 1) * math.Pow(10, float64(rng.Intn(40)-20))
	}
	for i := 0; i < 20000; i++ {
		a, b := val(), val()
		mn, mx := math.Min(a, b), math.Max(a, b)
		c, d := val(), val()
		wmn, wmx := math.Min(mn, math.Min(c, d)), math.Max(mx, math.Max(c, d))
		e, s := histGrid(mn, mx)
		E, S := histGrid(wmn, wmx)
		if E < e {
			t.Fatalf("[%g, %g] ⊂ [%g, %g]: wider grid 2^%d finer than 2^%d", mn, mx, wmn, wmx, E, e)
		}
		var f, w Histogram
		f.setGrid(e, s)
		w.setGrid(E, S)
		for _, k := range []int{0, 1, HistBins / 2, HistBins - 1} {
			// exact arithmetic: edges are dyadic, so 4096 bits hold them all
			left := new(big.Float).SetPrec(4096).SetFloat64(f.Lo)
			left.Add(left, new(big.Float).SetFloat64(float64(k)*f.Width))
			right := new(big.Float).SetPrec(4096).Add(left, new(big.Float).SetFloat64(f.Width))
			pos := new(big.Float).SetPrec(4096).Sub(left, new(big.Float).SetFloat64(w.Lo))
			pos.Quo(pos, new(big.Float).SetFloat64(w.Width))
			j, _ := pos.Int(nil) // pos ≥ 0 inside the window: truncation is floor
			lo := new(big.Float).SetPrec(4096).SetInt(j)
			lo.Mul(lo, new(big.Float).SetFloat64(w.Width))
			lo.Add(lo, new(big.Float).SetFloat64(w.Lo))
			hi := new(big.Float).SetPrec(4096).Add(lo, new(big.Float).SetFloat64(w.Width))
			if left.Cmp(lo) < 0 || right.Cmp(hi) > 0 {
				t.Fatalf("fine bin %d of 2^%d at %d straddles a coarse edge of 2^%d at %d", k, e, s, E, S)
			}
		}
	}
}

// Merging the histograms of two halves of a sample, each on its own grid,
// gives the counts of the whole sample counted on its own grid (the
// reference: countInto of all values on the whole range's grid).
func TestMergeHistExact(t *testing.T) {
	rng := rand.New(rand.NewSource(3))
	for trial := 0; trial < 200; trial++ {
		x := make([]float32, 1000)
		scale := math.Pow(2, float64(rng.Intn(20)-10))
		for i := range x {
			x[i] = float32(rng.NormFloat64() * scale * float64(1+i/500*30)) // the second half is wider
		}
		cut := rng.Intn(len(x)-2) + 1
		ref := Histogram{}
		mn, mx := minMax(x)
		ref.prepare(mn, mx)
		ref.countInto(ref.Counts, x)
		var a, b Histogram
		for _, part := range []struct {
			h *Histogram
			v []float32
		}{{&a, x[:cut]}, {&b, x[cut:]}} {
			lo, hi := minMax(part.v)
			part.h.AddFloat32(part.v, lo, hi)
		}
		a.MergeHist(&b)
		if a.Exp != ref.Exp || a.Start != ref.Start {
			t.Fatalf("trial %d: merged grid 2^%d at %d, whole sample's 2^%d at %d", trial, a.Exp, a.Start, ref.Exp, ref.Start)
		}
		for i := range ref.Counts {
			if a.Counts[i] != ref.Counts[i] {
				t.Fatalf("trial %d: bin %d: merged %d, whole %d", trial, i, a.Counts[i], ref.Counts[i])
			}
		}
	}
}

func minMax(x []float32) (float64, float64) {
	mn, mx := math.Inf(1), math.Inf(-1)
	for _, v := range x {
		mn, mx = math.Min(mn, float64(v)), math.Max(mx, float64(v))
	}
	return mn, mx
}

// The dead-unit trail (units not yet > 0 after each batch) of two
// consecutive runs merged equals the trail of one run over all batches,
// for units that first fire in the first part, in the second, or never.
func TestTrailMergeExact(t *testing.T) {
	const units = 6
	// first[u]: the batch in which unit u is first > 0 (−1: never)
	first := []int{0, 2, 3, 5, 7, -1}
	batch := func(j int) *tensor.Tensor {
		x := make([]float32, 2*units)
		for u, f := range first {
			if f >= 0 && j >= f {
				x[units+u] = 1 // second row
			} else {
				x[u] = -1
			}
		}
		return tensor.From(x, 2, units)
	}
	newLayer := func() *layerAcc {
		return &layerAcc{output: "r", act: actInfo{kind: ActReLU}, mom: NewMoments()}
	}
	c := &Collector{}
	whole := newLayer()
	for j := 0; j < 8; j++ {
		c.observe(whole, batch(j))
	}
	for cut := 1; cut < 8; cut++ {
		a, b := newLayer(), newLayer()
		for j := 0; j < 8; j++ {
			if j < cut {
				c.observe(a, batch(j))
			} else {
				c.observe(b, batch(j))
			}
		}
		e := &Enc{}
		saveLayer(e, b)
		if err := loadLayer(&Dec{B: e.B}, a); err != nil {
			t.Fatal(err)
		}
		if len(a.deadTrail) != len(whole.deadTrail) {
			t.Fatalf("cut %d: trail of %d, want %d", cut, len(a.deadTrail), len(whole.deadTrail))
		}
		for j := range whole.deadTrail {
			if a.deadTrail[j] != whole.deadTrail[j] {
				t.Fatalf("cut %d: trail %v, one run %v", cut, a.deadTrail, whole.deadTrail)
			}
		}
		for u := range whole.everPos {
			if a.everPos[u] != whole.everPos[u] {
				t.Fatalf("cut %d: unit %d ever positive %v, one run %v", cut, u, a.everPos[u], whole.everPos[u])
			}
		}
	}
	if want := []int32{5, 5, 4, 3, 3, 2, 2, 1}; len(whole.deadTrail) != 8 || whole.deadTrail[2] != want[2] || whole.deadTrail[7] != want[7] {
		t.Fatalf("one run's trail %v, want %v (by construction)", whole.deadTrail, want)
	}
}
