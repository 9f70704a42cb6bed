package stats

import (
	"math"
	"math/rand/v2"
	"testing"
)

// Streaming moments merged over uneven batches agree with a two-pass float64
// computation (mean, then mean squared deviation), also with a large offset
// where the naive Σx² − (Σx)²/n formula loses every digit.
func TestMomentsAgainstTwoPass(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	x := make([]float32, 10007)
	for i := range x {
		x[i] = float32(1e4 + rng.NormFloat64()*0.5)
	}
	m := NewMoments()
	for lo := 0; lo < len(x); {
		hi := min(len(x), lo+1+rng.IntN(900))
		m.AddFloat32(x[lo:hi])
		lo = hi
	}
	var sum float64
	for _, v := range x {
		sum += float64(v)
	}
	mean := sum / float64(len(x))
	var ss float64
	mn, mx := math.Inf(1), math.Inf(-1)
	for _, v := range x {
		d := float64(v) - mean
		ss += d * d
		mn, mx = math.Min(mn, float64(v)), math.Max(mx, float64(v))
	}
	vr := ss / float64(len(x))
	if m.N != int64(len(x)) || math.Abs(m.Mean-mean) > 1e-9*mean || math.Abs(m.Var()-vr) > 1e-6*vr {
		t.Fatalf("streaming n=%d mean=%.12g var=%.12g; two-pass mean=%.12g var=%.12g", m.N, m.Mean, m.Var(), mean, vr)
	}
	if m.Min != mn || m.Max != mx {
		t.Fatalf("min/max %g %g, want %g %g", m.Min, m.Max, mn, mx)
	}
}

// Non-finite values are counted apart and excluded from the moments.
func TestMomentsNonfinite(t *testing.T) {
	m := NewMoments()
	m.AddFloat32([]float32{1, float32(math.NaN()), 3, float32(math.Inf(1)), 0})
	if m.N != 3 || m.Nonfinite != 2 || m.Zeros != 1 || m.Mean != 4.0/3 {
		t.Fatalf("got %+v", m)
	}
}

// The adaptive histogram keeps every finite value: counts sum to the count,
// and every value lies within the edges, as batches widen the range both ways.
func TestHistogramAdaptsWithoutClipping(t *testing.T) {
	rng := rand.New(rand.NewPCG(2, 2))
	var h Histogram
	var n int64
	all := []float32{}
	for b := 0; b < 20; b++ {
		scale := math.Pow(2, float64(b%7))
		x := make([]float32, 500)
		for i := range x {
			x[i] = float32(rng.NormFloat64()*scale + float64(b-10))
		}
		m := NewMoments()
		m.AddFloat32(x)
		h.AddFloat32(x, m.Min, m.Max)
		n += int64(len(x))
		all = append(all, x...)
	}
	var total int64
	for _, c := range h.Counts {
		total += c
	}
	if total != n {
		t.Fatalf("histogram holds %d values, want %d", total, n)
	}
	e := h.Edges()
	for _, v := range all {
		if float64(v) < e[0] || float64(v) > e[len(e)-1] {
			t.Fatalf("value %g outside edges [%g, %g]", v, e[0], e[len(e)-1])
		}
	}
	// the median of a symmetric mixture centred near −0.5 lies near it (bin-width accuracy)
	if q := h.Quantile(0.5); math.Abs(q-(-0.5)) > 2*h.Width+1 {
		t.Errorf("median %g, bin width %g", q, h.Width)
	}
}

// Any split of the same values into batches gives the identical histogram
// (grid and counts), since the grid depends only on the overall min and max.
func TestHistogramBatchIndependent(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 3))
	x := make([]float32, 6000)
	for i := range x {
		x[i] = float32(rng.ExpFloat64()*3 - 0.7)
	}
	build := func(batch int) Histogram {
		var h Histogram
		for lo := 0; lo < len(x); lo += batch {
			b := x[lo:min(len(x), lo+batch)]
			m := NewMoments()
			m.AddFloat32(b)
			h.AddFloat32(b, m.Min, m.Max)
		}
		return h
	}
	ref := build(len(x))
	for _, bs := range []int{1, 7, 100, 999, 3000} {
		h := build(bs)
		if h.Lo != ref.Lo || h.Width != ref.Width {
			t.Fatalf("batch %d: grid lo=%g w=%g, want lo=%g w=%g", bs, h.Lo, h.Width, ref.Lo, ref.Width)
		}
		for i := range h.Counts {
			if h.Counts[i] != ref.Counts[i] {
				t.Fatalf("batch %d: bin %d has %d, want %d", bs, i, h.Counts[i], ref.Counts[i])
			}
		}
	}
	// at least a quarter of the window is used (the grid is the finest that covers the range)
	if span := ref.Max - ref.Min; span < ref.Width*HistBins/4 {
		t.Errorf("range %g uses under a quarter of the %g-wide window", span, ref.Width*HistBins)
	}
}
