// Package stats turns observed node outputs into per-layer statistics
// (streaming over batches), runs the health checks over them and ranks the layers.
package stats

import (
	"math"
)

// Moments accumulates count, mean, M2 (sum of squared deviations), min, max,
// zero and non-finite counts of a stream of float values. Batches are merged
// with Chan et al.'s parallel formula:
//
//	n = nA+nB, δ = μB−μA, μ = μA + δ·nB/n, M2 = M2A + M2B + δ²·nA·nB/n
//
// which stays accurate when the mean is large relative to the spread.
// Non-finite values are counted apart and excluded from the moments.
type Moments struct {
	N         int64
	Mean      float64
	M2        float64
	Min, Max  float64
	Zeros     int64
	Nonfinite int64
}

// NewMoments returns empty moments (Min=+Inf, Max=−Inf).
func NewMoments() Moments { return Moments{Min: math.Inf(1), Max: math.Inf(-1)} }

// AddFloat32 folds a batch of float32 values in: a two-pass pass over the
// batch (sum, then squared deviations from the batch mean) followed by a merge.
func (m *Moments) AddFloat32(x []float32) {
	var b Moments
	b.Min, b.Max = math.Inf(1), math.Inf(-1)
	var sum float64
	var n int64
	mn, mx := float32(math.Inf(1)), float32(math.Inf(-1))
	for _, v := range x {
		if v != v || v > math.MaxFloat32 || v < -math.MaxFloat32 {
			b.Nonfinite++
			continue
		}
		if v == 0 {
			b.Zeros++
		}
		sum += float64(v)
		n++
		mn = min(mn, v)
		mx = max(mx, v)
	}
	b.N = n
	if n > 0 {
		b.Mean = sum / float64(n)
		var m2 float64
		mu := b.Mean
		for _, v := range x {
			if v != v || v > math.MaxFloat32 || v < -math.MaxFloat32 {
				continue
			}
			d := float64(v) - mu
			m2 += d * d
		}
		b.M2 = m2
		b.Min, b.Max = float64(mn), float64(mx)
	}
	m.Merge(b)
}

// Merge folds another set of moments into m.
func (m *Moments) Merge(b Moments) {
	m.Zeros += b.Zeros
	m.Nonfinite += b.Nonfinite
	if b.N == 0 {
		return
	}
	if m.N == 0 {
		z, nf := m.Zeros, m.Nonfinite
		*m = b
		m.Zeros, m.Nonfinite = z, nf
		return
	}
	n := m.N + b.N
	d := b.Mean - m.Mean
	m.Mean += d * float64(b.N) / float64(n)
	m.M2 += b.M2 + d*d*float64(m.N)*float64(b.N)/float64(n)
	m.N = n
	m.Min = math.Min(m.Min, b.Min)
	m.Max = math.Max(m.Max, b.Max)
}

// Var is the population variance M2/N (NaN when empty).
func (m *Moments) Var() float64 {
	if m.N == 0 {
		return math.NaN()
	}
	return m.M2 / float64(m.N)
}

// Std is √Var.
func (m *Moments) Std() float64 { return math.Sqrt(m.Var()) }

// Histogram is an equal-width histogram on a grid that depends only on the
// finite minimum and maximum seen, never on how the values were split into
// batches: the bin width is W = 2^Exp and the window of HistBins bins starts
// at a multiple of (HistBins/2)·W. The grid is the smallest W (at least
// max|x|·2⁻⁴⁰) whose aligned window covers [min, max]. When the range grows,
// W doubles and bins merge exactly (bin edges stay aligned), so counts always
// sum to the number of finite values added, nothing is clipped, and any batch
// split of the same sample gives the same histogram.
type Histogram struct {
	Exp    int   // bin width is 2^Exp
	Start  int64 // window starts at Start·(HistBins/2)·2^Exp
	Counts []int64
	Min    float64 // finite minimum seen
	Max    float64 // finite maximum seen
	Lo     float64 // left edge of the window
	Width  float64 // bin width 2^Exp
}

// HistBins is the number of bins per histogram (even, so that windows align at half-window steps).
const HistBins = 128

// histGrid returns the canonical (exponent, start) of the window for [mn, mx].
func histGrid(mn, mx float64) (int, int64) {
	amax := math.Max(math.Abs(mn), math.Abs(mx))
	_, ea := math.Frexp(amax)
	e := max(ea-40, -140)
	if span := mx - mn; span > 0 {
		_, es := math.Frexp(span / HistBins)
		e = max(e, es-1)
	}
	for ; e < 1100; e++ {
		h := math.Ldexp(HistBins/2, e)
		j := math.Floor(mn / h)
		if mx < (j+2)*h {
			return e, int64(j)
		}
	}
	return e, 0
}

// AddFloat32 adds the finite values of x; mn and mx are x's finite min and max.
func (h *Histogram) AddFloat32(x []float32, mn, mx float64) {
	if h.prepare(mn, mx) {
		h.countInto(h.Counts, x)
	}
}

// prepare widens the grid for a batch with finite range [mn, mx]; false when
// the batch has no finite values.
func (h *Histogram) prepare(mn, mx float64) bool {
	if math.IsInf(mn, 0) || math.IsInf(mx, 0) || mn > mx {
		return false
	}
	if h.Counts == nil {
		h.Min, h.Max = mn, mx
	} else {
		h.Min, h.Max = math.Min(h.Min, mn), math.Max(h.Max, mx)
	}
	e, start := histGrid(h.Min, h.Max)
	if h.Counts == nil {
		h.Counts = make([]int64, HistBins)
		h.setGrid(e, start)
	} else if e != h.Exp || start != h.Start {
		h.regrid(e, start)
	}
	return true
}

// countInto adds the finite values of x to counts on the current grid.
func (h *Histogram) countInto(counts []int64, x []float32) {
	inv := 1 / h.Width
	lo := h.Lo
	last := len(counts) - 1
	for _, v := range x {
		f := float64(v)
		if f != f || f-f != 0 { // NaN or ±Inf
			continue
		}
		i := int((f - lo) * inv)
		if i > last {
			i = last
		} else if i < 0 {
			i = 0
		}
		counts[i]++
	}
}

func (h *Histogram) setGrid(e int, start int64) {
	h.Exp, h.Start = e, start
	h.Width = math.Ldexp(1, e)
	h.Lo = float64(start) * math.Ldexp(HistBins/2, e)
}

// regrid moves the counts onto a coarser or shifted aligned grid; every old
// bin lies inside exactly one new bin, so no count is split or lost.
func (h *Histogram) regrid(e int, start int64) {
	oldLo, oldW, old := h.Lo, h.Width, h.Counts
	h.setGrid(e, start)
	h.Counts = make([]int64, HistBins)
	for i, c := range old {
		if c == 0 {
			continue
		}
		left := oldLo + float64(i)*oldW
		k := int(math.Floor((left - h.Lo) / h.Width))
		k = min(max(k, 0), HistBins-1)
		h.Counts[k] += c
	}
}

// Edges returns the bin edges (len(Counts)+1 values).
func (h *Histogram) Edges() []float64 {
	e := make([]float64, len(h.Counts)+1)
	for i := range e {
		e[i] = h.Lo + float64(i)*h.Width
	}
	return e
}

// Quantile interpolates the q-quantile (0..1) linearly within the bin holding it.
func (h *Histogram) Quantile(q float64) float64 {
	var total int64
	for _, c := range h.Counts {
		total += c
	}
	if total == 0 {
		return math.NaN()
	}
	target := q * float64(total)
	var acc float64
	for i, c := range h.Counts {
		if c == 0 {
			continue
		}
		if acc+float64(c) >= target {
			frac := (target - acc) / float64(c)
			return h.Lo + (float64(i)+frac)*h.Width
		}
		acc += float64(c)
	}
	return h.Lo + float64(len(h.Counts))*h.Width
}

// Trimmed returns edges and counts with empty leading and trailing bins removed.
func (h *Histogram) Trimmed() ([]float64, []int64) {
	lo, hi := 0, len(h.Counts)
	for lo < hi && h.Counts[lo] == 0 {
		lo++
	}
	for hi > lo && h.Counts[hi-1] == 0 {
		hi--
	}
	if lo == hi {
		return nil, nil
	}
	e := h.Edges()[lo : hi+1]
	return append([]float64{}, e...), append([]int64{}, h.Counts[lo:hi]...)
}
