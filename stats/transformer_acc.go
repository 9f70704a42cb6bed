package stats

import (
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Streaming, mergeable transformer statistics (docs/transformers.md). Every
// accumulator is a set of sums and counts, so two accumulators of the same
// tensor merge by adding them field by field (Merge), and batches may be
// split in any way.

// attnAcc accumulates one attention-probability tensor (…, H, Sq, K), K the
// last axis, H axis 1 of a rank-4 tensor (one head otherwise). For each query
// row with K' = #{j: p_j > 0}:
//
//	H_row = −Σ_{p_j>0} p_j ln p_j,   e_row = H_row / ln K'   (rows with K' > 1)
//
// head h's entropy is Σ e_row / #rows(K'>1) and its max probability
// Σ max_j p_j / #rows; rows with K' = 1 are counted in oneHot.
type attnAcc struct {
	heads  int
	entSum []float64
	entN   []int64
	maxSum []float64
	rows   []int64
	oneHot []int64
	// mask detection: rows with some p = 0, and of them the rows whose zero
	// keys are exactly j > i (causal), over square (Sq = K) tensors.
	maskedRows, causalRows, squareRows, totalRows int64
}

func newAttnAcc(h int) *attnAcc {
	return &attnAcc{heads: h, entSum: make([]float64, h), entN: make([]int64, h), maxSum: make([]float64, h),
		rows: make([]int64, h), oneHot: make([]int64, h)}
}

// observe adds one batch of a (…, Sq, K) tensor whose leading slices are
// (batch, head) pairs with the head varying fastest: slice n is head
// n mod heads (rank 4: (B, H, Sq, K); a rank-3 (B·H, Sq, K) tensor as the
// PyTorch exporter writes it). Σ p ln p comes from rowEnt (float32
// logarithms on AVX-512: within 1e-6 of Σ p|ln p|, relative).
func (a *attnAcc) observe(t *tensor.Tensor) bool {
	x, ok := t.Data.([]float32)
	if !ok || t.Rank() < 2 {
		return false
	}
	r := t.Rank()
	K, Sq := t.Shape[r-1], t.Shape[r-2]
	if K == 0 || Sq == 0 {
		return false
	}
	h := a.heads
	rows := len(x) / K
	for row := 0; row < rows; row++ {
		p := x[row*K : (row+1)*K]
		head := (row / Sq) % h
		i := row % Sq
		// causal: p_j > 0 exactly for j ≤ i (a square tensor's row i)
		var sum float64
		var nz int
		var mx float32
		causal := false
		if Sq == K {
			s1, n1, m1 := rowEnt(p[:i+1])
			s2, n2, m2 := rowEnt(p[i+1:])
			sum, nz, mx = s1+s2, n1+n2, max(m1, m2)
			causal = n1 == i+1 && n2 == 0
		} else {
			sum, nz, mx = rowEnt(p)
		}
		ent := -sum
		a.rows[head]++
		a.maxSum[head] += float64(mx)
		switch {
		case nz > 1:
			a.entSum[head] += ent / lnInt(nz)
			a.entN[head]++
		case nz == 1:
			a.oneHot[head]++
		}
		a.totalRows++
		if nz < K {
			a.maskedRows++
		}
		if Sq == K {
			a.squareRows++
			if causal {
				a.causalRows++
			}
		}
	}
	return true
}

// rowEntGo is Σ_{p_j > 0} p_j ln p_j (ln p from fastLn, below 1e-9
// relative), the number of p_j > 0 and their maximum (0 when none).
func rowEntGo(p []float32) (sum float64, nz int, mx float32) {
	for _, v := range p {
		if v > 0 {
			nz++
			sum += float64(v) * fastLn(v)
			if v > mx {
				mx = v
			}
		}
	}
	return sum, nz, mx
}

// lnTable[k] = ln(1 + k/1024).
var lnTable = func() (t [1025]float64) {
	for k := range t {
		t[k] = math.Log1p(float64(k) / 1024)
	}
	return
}()

// fastLn is ln v for a positive finite float32: v = 2^e·(1+f), f = k/1024 + δ
// (0 ≤ δ < 1/1024), ln v = e·ln2 + ln(1+k/1024) + ln(1+u), u = δ/(1+k/1024),
// ln(1+u) ≈ u − u²/2 + u³/3 (|u| < 1/1024: error below 1e-12 absolute).
func fastLn(v float32) float64 {
	b := math.Float32bits(v)
	e := int(b>>23) - 127
	m := b & 0x7fffff
	if e == -127 { // subnormal
		return math.Log(float64(v))
	}
	k := m >> 13
	fk := 1 + float64(k)/1024
	d := float64(m&0x1fff) / (1 << 23)
	u := d / fk
	return float64(e)*math.Ln2 + lnTable[k] + u*(1-u*(0.5-u/3))
}

var lnInts = func() (t [4096]float64) {
	for i := range t {
		t[i] = math.Log(float64(i))
	}
	return
}()

func lnInt(n int) float64 {
	if n < len(lnInts) {
		return lnInts[n]
	}
	return math.Log(float64(n))
}

func (a *attnAcc) merge(b *attnAcc) {
	for h := range a.entSum {
		a.entSum[h] += b.entSum[h]
		a.entN[h] += b.entN[h]
		a.maxSum[h] += b.maxSum[h]
		a.rows[h] += b.rows[h]
		a.oneHot[h] += b.oneHot[h]
	}
	a.maskedRows += b.maskedRows
	a.causalRows += b.causalRows
	a.squareRows += b.squareRows
	a.totalRows += b.totalRows
}

func (a *attnAcc) entropy() []float64 {
	out := make([]float64, a.heads)
	for h := range out {
		out[h] = math.NaN()
		if a.entN[h] > 0 {
			out[h] = a.entSum[h] / float64(a.entN[h])
		}
	}
	return out
}

func (a *attnAcc) maxProb() []float64 {
	out := make([]float64, a.heads)
	for h := range out {
		if a.rows[h] > 0 {
			out[h] = a.maxSum[h] / float64(a.rows[h])
		}
	}
	return out
}

// The |x| histogram has one bin per value of the top 14 bits of |x|'s
// float32 pattern (8 exponent bits, 6 mantissa bits): bin k holds
// 2^e·(1 + m/64) ≤ |x| < 2^e·(1 + (m+1)/64), so a median read from it (the
// bin's centre) is within 1/128 ≈ 0.8% of the exact median; zero and
// subnormals fall in the lowest bins.
const absBins = 1 << 14

// residAcc accumulates one residual-stream tensor (…, D), D the last axis:
// max |x|, a log-spaced histogram of |x| (median), per feature d the number
// of positions with |x_d| ≥ 6, and for rank-3 (B, S, D) tensors per
// sequence the mean pairwise cosine similarity of its S token vectors,
//
//	sim = (|Σ_i x̂_i|² − S') / (S'(S'−1)),  x̂_i = x_i/|x_i| over the S' ≥ 2 non-zero tokens.
type residAcc struct {
	dim       int
	maxAbs    float64
	n         int64
	hist      []int64
	hist2     []int64  // more counts of hist's bins, added in by foldHist (nil before the first observe)
	over32    []uint32 // scratch of the vector kernel: |x| ≥ 6 counts of one observe
	over6     []int64
	positions int64
	simSum    float64
	simN      int64
}

func newResidAcc(d int) *residAcc {
	return &residAcc{dim: d, hist: make([]int64, absBins), over6: make([]int64, d)}
}

func (r *residAcc) observe(t *tensor.Tensor) bool {
	x, ok := t.Data.([]float32)
	if !ok || t.Rank() < 2 || t.Shape[t.Rank()-1] != r.dim || r.dim == 0 {
		return false
	}
	D := r.dim
	if r.hist2 == nil {
		r.hist2 = make([]int64, absBins)
	}
	var mx uint32
	var nan int64
	rows := x[:len(x)/D*D]
	if residVec && D%16 == 0 {
		// the vector kernel, and residGo for each group of 16 holding a
		// NaN or ±Inf; its |x| ≥ 6 counts go to over32, added in after
		if len(r.over32) != D {
			r.over32 = make([]uint32, D)
		}
		for i := 0; i < len(rows); {
			i += residKernel(rows[i:], D, i%D, r.hist, r.hist2, r.over32, &mx)
			if i < len(rows) {
				nan += r.residGo(rows[i:i+16], i%D, &mx)
				i += 16
			}
		}
		for d, c := range r.over32 {
			r.over6[d] += int64(c)
		}
		clear(r.over32)
	} else {
		nan = r.residGo(rows, 0, &mx)
	}
	for _, v := range x[len(x)/D*D:] { // a partial last row (not in the loop above)
		if math.Float32bits(v)&0x7fffffff >= 0x7f800000 {
			nan++
		}
	}
	r.n += int64(len(x)) - nan
	r.maxAbs = math.Max(r.maxAbs, float64(math.Float32frombits(mx)))
	r.positions += int64(len(x) / D)
	if t.Rank() == 3 {
		r.similarity(x, t.Shape[0], t.Shape[1])
	}
	return true
}

// residGo counts the values of x, which starts at feature d0, into the |x|
// histogram (even values into hist, odd ones into hist2, so that
// consecutive values do not wait on each other's increment), the |x| ≥ 6
// counts and the maximum of |x|'s bits (two running maxima, folded into
// *mx); it returns the number of NaN and ±Inf values.
func (r *residAcc) residGo(x []float32, d0 int, mx *uint32) (nan int64) {
	D := r.dim
	h0, h1 := r.hist[:absBins], r.hist2[:absBins]
	over := r.over6[:D]
	six := six32
	mx0, mx1 := *mx, uint32(0)
	d := d0
	i := 0
	for ; i+2 <= len(x); i += 2 {
		b0 := math.Float32bits(x[i]) & 0x7fffffff
		b1 := math.Float32bits(x[i+1]) & 0x7fffffff
		d1 := d + 1
		if d1 == D {
			d1 = 0
		}
		if b0 >= 0x7f800000 || b1 >= 0x7f800000 {
			for k, b := range [2]uint32{b0, b1} {
				if b >= 0x7f800000 {
					nan++ // NaN, ±Inf
					continue
				}
				h0[(b>>17)&(absBins-1)]++
				mx0 = max(mx0, b)
				if b >= six {
					over[[2]int{d, d1}[k]]++
				}
			}
		} else {
			mx0, mx1 = max(mx0, b0), max(mx1, b1)
			if b0 >= six {
				over[d]++
			}
			if b1 >= six {
				over[d1]++
			}
			h0[(b0>>17)&(absBins-1)]++
			h1[(b1>>17)&(absBins-1)]++
		}
		if d = d1 + 1; d == D {
			d = 0
		}
	}
	if i < len(x) {
		b := math.Float32bits(x[i]) & 0x7fffffff
		if b >= 0x7f800000 {
			nan++
		} else {
			h0[(b>>17)&(absBins-1)]++
			mx0 = max(mx0, b)
			if b >= six {
				over[d]++
			}
		}
	}
	*mx = max(mx0, mx1)
	return nan
}

// similarity adds, for each of the B sequences of S rows of r.dim values in
// x, the mean pairwise cosine similarity of its non-zero finite rows,
// (|Σ_i x̂_i|² − S')/(S'(S'−1)), to simSum (sequences with S' ≥ 2 only).
// Σ_i x̂_i is summed in float64 in row order for each feature, four rows
// per sweep over the features (the same additions in the same order as
// one row per sweep, with a quarter of the loads and stores of the sum).
func (r *residAcc) similarity(x []float32, B, S int) {
	D := r.dim
	u := make([]float64, D)
	qs := make([]float64, S)
	rows := make([]int, 0, S)
	invs := make([]float64, 0, S)
	for b := 0; b < B; b++ {
		clear(u)
		seq := x[b*S*D : (b+1)*S*D]
		sumSquares(qs, seq, D)
		rows, invs = rows[:0], invs[:0]
		for s, q := range qs {
			if q == 0 || math.IsNaN(q) || math.IsInf(q, 0) {
				continue
			}
			rows = append(rows, s)
			invs = append(invs, 1/math.Sqrt(q))
		}
		cnt := len(rows)
		if cnt < 2 {
			continue
		}
		k := 0
		for ; k+4 <= cnt; k += 4 {
			r0 := seq[rows[k]*D : rows[k]*D+D]
			r1 := seq[rows[k+1]*D : rows[k+1]*D+D]
			r2 := seq[rows[k+2]*D : rows[k+2]*D+D]
			r3 := seq[rows[k+3]*D : rows[k+3]*D+D]
			addRows4(u, r0, r1, r2, r3, &[4]float64{invs[k], invs[k+1], invs[k+2], invs[k+3]})
		}
		for ; k < cnt; k++ {
			row, inv := seq[rows[k]*D:rows[k]*D+D], invs[k]
			for d, v := range row {
				u[d] += float64(v) * inv
			}
		}
		var uu float64
		for _, v := range u {
			uu += v * v
		}
		r.simSum += (uu - float64(cnt)) / float64(cnt*(cnt-1))
		r.simN++
	}
}

// addRows4Go does u[d] += r0[d]·inv[0], then r1[d]·inv[1], r2[d]·inv[2]
// and r3[d]·inv[3], each product and sum rounded to float64: four rows of
// the token-similarity sum per sweep over the features.
func addRows4Go(u []float64, r0, r1, r2, r3 []float32, inv *[4]float64) {
	i0, i1, i2, i3 := inv[0], inv[1], inv[2], inv[3]
	r0, r1, r2, r3 = r0[:len(u)], r1[:len(u)], r2[:len(u)], r3[:len(u)]
	for d := range u {
		a := u[d]
		a += float64(r0[d]) * i0
		a += float64(r1[d]) * i1
		a += float64(r2[d]) * i2
		a += float64(r3[d]) * i3
		u[d] = a
	}
}

// sumSquares sets q[s] = Σ_d x[s·D+d]² for each row s of x (float64, in
// order of d). Four rows go at a time: four independent chains of
// additions instead of one, each summed in the same order as one row alone.
func sumSquares(q []float64, x []float32, D int) {
	s := sumSquares16(q, x, D) // sixteen rows at a time where there is a vector kernel
	for ; s+4 <= len(q); s += 4 {
		r0, r1, r2, r3 := x[s*D:(s+1)*D], x[(s+1)*D:(s+2)*D], x[(s+2)*D:(s+3)*D], x[(s+3)*D:(s+4)*D]
		var q0, q1, q2, q3 float64
		for d := range r0 {
			v0, v1, v2, v3 := float64(r0[d]), float64(r1[d]), float64(r2[d]), float64(r3[d])
			q0 += v0 * v0
			q1 += v1 * v1
			q2 += v2 * v2
			q3 += v3 * v3
		}
		q[s], q[s+1], q[s+2], q[s+3] = q0, q1, q2, q3
	}
	for ; s < len(q); s++ {
		var qs float64
		for _, v := range x[s*D : (s+1)*D] {
			qs += float64(v) * float64(v)
		}
		q[s] = qs
	}
}

// foldHist adds the second count table into hist.
func (r *residAcc) foldHist() {
	if r.hist2 == nil {
		return
	}
	for i, v := range r.hist2 {
		r.hist[i] += v
	}
	clear(r.hist2)
}

func (r *residAcc) merge(b *residAcc) {
	r.foldHist()
	b.foldHist()
	r.maxAbs = math.Max(r.maxAbs, b.maxAbs)
	r.n += b.n
	for i := range r.hist {
		r.hist[i] += b.hist[i]
	}
	for i := range r.over6 {
		r.over6[i] += b.over6[i]
	}
	r.positions += b.positions
	r.simSum += b.simSum
	r.simN += b.simN
}

// median is the centre of the bin holding the ⌈n/2⌉-th smallest |x| (0 in the zero bin).
func (r *residAcc) median() float64 {
	r.foldHist()
	if r.n == 0 {
		return math.NaN()
	}
	half := (r.n + 1) / 2
	var c int64
	for k, v := range r.hist {
		c += v
		if c >= half {
			if k == 0 {
				return 0
			}
			lo := float64(math.Float32frombits(uint32(k) << 17))
			hi := float64(math.Float32frombits(uint32(k+1) << 17))
			return (lo + hi) / 2
		}
	}
	return r.maxAbs
}

// six32 is the float32 bit pattern of 6: |x| ≥ 6 ⇔ bits(|x|) ≥ six32.
var six32 = math.Float32bits(6)

// outlierDims lists the features with |x| ≥ 6 at ≥ share of positions.
func (r *residAcc) outlierDims(share float64) []int {
	out := []int{}
	if r.positions == 0 {
		return out
	}
	for d, c := range r.over6 {
		if float64(c)/float64(r.positions) >= share {
			out = append(out, d)
		}
	}
	return out
}

// scoreAcc counts the −inf values of an attention-scores tensor (the mask).
type scoreAcc struct{ negInf int64 }

func (s *scoreAcc) observe(t *tensor.Tensor) {
	if x, ok := t.Data.([]float32); ok {
		for _, v := range x {
			if math.IsInf(float64(v), -1) {
				s.negInf++
			}
		}
	}
}
