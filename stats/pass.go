package stats

import (
	"math"
	"runtime"
	"sync"

	"github.com/vitals-health/vitals/internal/par"
)

// The fused statistics pass: one read of a node output gives its moments,
// its saturation count and its histogram counts on a given grid.
//
// A tensor is cut into chunks of fastChunk values (from its start, whatever
// the worker count). Each chunk is summed about a shift (its first finite
// value): Σd and Σd² with d = float64(x) − shift over 16 float64 lanes
// (element i of the chunk goes to lane i mod 16, Σd² by fused multiply-add),
// with float32 min and max and integer counts of ±0, −0, non-finite and
// saturated values. A chunk holding a NaN or ±Inf gets its moments again
// from the careful per-value loop; its counts stay valid. Chunk moments are
// merged in chunk order (Chan et al.), so results do not depend on the
// number of workers.
//
// The histogram bin of a value is the one of Histogram.countInto,
//
//	t = (float64(v) − lo)·inv, bin = ⌊min(max(t, 0), 127)⌋,
//
// and non-finite values go to a junk bin (index HistBins). Zeros, often half
// of a ReLU output, are not counted one by one: chunkPass adds their number
// (known from the moments) to the bin of 0. The other counts are spread
// over histTables interleaved tables so that runs of equal bins do not wait
// on each other's increments.

// histTables is the number of interleaved count tables.
const histTables = 8

// histStride is the length of one count table: HistBins bins, the junk bin
// (index HistBins), the slot where the AVX2 kernel drops zeros (HistBins+1,
// never read) and padding.
const histStride = HistBins + 8

// passParams are a pass's constants: the shift of the moments, the
// histogram window (left edge lo and inverse bin width inv), inclusive
// saturation bounds (a value is saturated when v ≤ satLo or v ≥ satHi; NaN
// bounds never match) and noHist to skip the histogram. The fields after
// noHist are derived by binF32 for the AVX-512 kernel (callers leave them
// zero). The layout is read by the assembly: keep the field order.
type passParams struct {
	sh, lo, inv  float64
	satLo, satHi float32
	noHist       bool
	// f32 says the window is a power-of-two grid on which the kernel may
	// take the bin in float32 (binF32): scale = inv, the clamp bounds
	// binLo = base and binHi = base+127 with base = lo·inv, tiny the
	// magnitude below which a nonzero value takes the float64 formula.
	f32                 bool
	histOnly            bool // only the histogram and the ±0 count (the moments are known)
	noSat               bool // set by binF32 when no value can be saturated (NaN bounds)
	scale, binLo, binHi float32
	base                int32
	tiny                float32
	top                 float64 // 127, the float64 formula's upper clamp
}

// binF32 fills p's derived fields. On a window with inv = 2^k (a float32
// normal number) and lo = base/inv for an integer base with |base|+128 <
// 2^24 (every grid of Histogram.prepare whose values are not far from
// zero relative to its bin width), the bin of a float32 v is
//
//	bin = ⌊min(max(v·inv, base), base+127)⌋ − base,
//
// computed in float32: v·inv is exact (a power-of-two scale; a result that
// overflows clamps as the float64 formula does, one that underflows is a
// value with |v| < tiny below), min, max and ⌊·⌋ of float32 values and
// integers below 2^24 are exact. It is the float64 formula's bin whenever
// that formula is exact, i.e. when float64(v) − lo is: true for |v| ≥
// tiny = 2^-28·|lo| (v normal: |v| + |lo| < 2^29·|v| < 2^53·ulp(v); a value
// outside the window clamps alike either way). Below tiny (for example a
// GELU output of −1e-20 beside lo = −0.5, where float64(v) − lo rounds up to
// the bin edge 0.5) the kernel takes the float64 formula itself, for the
// whole group of 16, so the counts stay those of binOf bit for bit.
func (p *passParams) binF32() {
	p.noSat = p.satLo != p.satLo && p.satHi != p.satHi
	p.top = HistBins - 1
	p.f32 = false
	fr, k := math.Frexp(p.inv)
	if fr != 0.5 || k-1 < -126 || k-1 > 127 {
		return
	}
	base := p.lo * p.inv
	if base != math.Trunc(base) || math.Abs(base)+HistBins >= 1<<24 || base/p.inv != p.lo {
		return
	}
	tiny := math.Ldexp(math.Abs(p.lo), -28)
	t32 := float32(tiny)
	if float64(t32) < tiny {
		t32 = math.Nextafter32(t32, float32(math.Inf(1)))
	}
	p.f32, p.scale, p.base, p.tiny = true, float32(p.inv), int32(base), t32
	p.binLo, p.binHi = float32(base), float32(base+HistBins-1)
}

// passLanes are the per-lane accumulators of a pass (the layout is read by
// the assembly: keep the field order and sizes).
type passLanes struct {
	s, q                [16]float64 // Σd and Σd² per lane
	mn, mx              [16]float32 // minimum and maximum per lane
	zeros, negz, nonfin [16]uint32  // counts of ±0, −0 and NaN/±Inf
	sat                 [16]uint32  // count of saturated values
}

func (l *passLanes) init() {
	*l = passLanes{}
	for i := range l.mn {
		l.mn[i] = float32(math.Inf(1))
		l.mx[i] = float32(math.Inf(-1))
	}
}

// passGo folds x into the lane accumulators and count tables: element i
// goes to float lane i mod 16 and table i mod histTables, the integer
// counts of the slice to lane 0, zeros to the unread table slot HistBins+1.
// It is the reference the vector kernels must match (float lanes bit for
// bit, counts and per-bin table sums exactly), and it does the tail they
// leave. The counts are branch-free (a zero is as likely as not).
func passGo(x []float32, p *passParams, tabs []uint32, l *passLanes) {
	if !p.noHist {
		tabs = tabs[:histTables*histStride]
	}
	satLo, satHi := p.satLo, p.satHi
	var zeros, negz, nonfins, sat uint32
	if p.histOnly && !p.noHist {
		histOnlyGo(x, p, tabs, l)
		return
	}
	for i, v := range x {
		j := i & 15
		f := float64(v)
		d := f - p.sh
		l.s[j] += d
		l.q[j] = math.FMA(d, d, l.q[j])
		if !(l.mn[j] < v) { // as VMINPS(acc, v)
			l.mn[j] = v
		}
		if !(l.mx[j] > v) {
			l.mx[j] = v
		}
		b := math.Float32bits(v)
		zero := isNil(b & 0x7fffffff)              // ±0
		nonfin := isNil(b&0x7f800000 ^ 0x7f800000) // NaN or ±Inf
		zeros += zero
		negz += isNil(b ^ 0x80000000)
		nonfins += nonfin
		if v <= satLo || v >= satHi {
			sat++
		}
		if p.noHist {
			continue
		}
		k := binOf(f, p)
		if nonfin != 0 {
			k = HistBins
		}
		if zero != 0 {
			k = HistBins + 1
		}
		tabs[(i%histTables)*histStride+k]++
	}
	l.zeros[0] += zeros
	l.negz[0] += negz
	l.nonfin[0] += nonfins
	l.sat[0] += sat
}

// histOnlyGo is passGo with histOnly: the count tables and the ±0 count
// alone, the other lane accumulators left as they are.
func histOnlyGo(x []float32, p *passParams, tabs []uint32, l *passLanes) {
	var zeros uint32
	for i, v := range x {
		b := math.Float32bits(v)
		zero := isNil(b & 0x7fffffff)
		zeros += zero
		k := binOf(float64(v), p)
		if isNil(b&0x7f800000^0x7f800000) != 0 {
			k = HistBins
		}
		if zero != 0 {
			k = HistBins + 1
		}
		tabs[(i%histTables)*histStride+k]++
	}
	l.zeros[0] += zeros
}

// isNil is 1 when u is 0, else 0, without a branch.
func isNil(u uint32) uint32 { return uint32((uint64(u) - 1) >> 63) }

// binOf is the histogram bin of f: ⌊min(max((f − lo)·inv, 0), 127)⌋ (0 for NaN).
func binOf(f float64, p *passParams) int {
	t := (f - p.lo) * p.inv
	if !(t > 0) {
		t = 0
	}
	if !(t < HistBins-1) {
		t = HistBins - 1
	}
	return int(t)
}

// pass folds x into l and tabs: the vector kernel for whole groups of 16
// when there is one, passGo for the rest. The result is the same as passGo's.
func pass(x []float32, p *passParams, tabs []uint32, l *passLanes) {
	m := len(x) &^ 15
	if m > 0 && passVec(x[:m], p, tabs, l) {
		x = x[m:]
	}
	passGo(x, p, tabs, l)
}

// moments turns the lane accumulators of chunk x, summed about sh, into
// Moments (counting and signing ±0 extremes exactly as AddFloat32 does).
func (l *passLanes) moments(x []float32, sh float64) Moments {
	var zeros, negz, nonfin int64
	for j := range 16 {
		zeros += int64(l.zeros[j])
		negz += int64(l.negz[j])
		nonfin += int64(l.nonfin[j])
	}
	if nonfin > 0 {
		return slowMoments(x)
	}
	m := NewMoments()
	if len(x) == 0 {
		return m
	}
	// lanes summed pairwise in a fixed order
	var s8, q8 [8]float64
	for j := range 8 {
		s8[j] = l.s[j] + l.s[j+8]
		q8[j] = l.q[j] + l.q[j+8]
	}
	s := ((s8[0] + s8[4]) + (s8[2] + s8[6])) + ((s8[1] + s8[5]) + (s8[3] + s8[7]))
	q := ((q8[0] + q8[4]) + (q8[2] + q8[6])) + ((q8[1] + q8[5]) + (q8[3] + q8[7]))
	mn, mx := l.mn[0], l.mx[0]
	for j := 1; j < 16; j++ {
		if l.mn[j] < mn {
			mn = l.mn[j]
		}
		if l.mx[j] > mx {
			mx = l.mx[j]
		}
	}
	n := float64(len(x))
	m.N = int64(len(x))
	m.Mean = sh + s/n
	m.M2 = max(0, q-s*s/n)
	m.Min, m.Max = float64(mn), float64(mx)
	if m.Min == 0 {
		// AddFloat32's builtin min prefers −0 to +0 wherever it saw one
		m.Min = 0
		if negz > 0 {
			m.Min = math.Copysign(0, -1)
		}
	}
	if m.Max == 0 {
		// and its builtin max prefers +0
		m.Max = math.Copysign(0, -1)
		if zeros > negz {
			m.Max = 0
		}
	}
	m.Zeros = zeros
	return m
}

func (l *passLanes) satCount() int64 {
	var n int64
	for _, c := range l.sat {
		n += int64(c)
	}
	return n
}

// passResult is what one tensor pass gives.
type passResult struct {
	mom    Moments
	counts [HistBins]int64 // histogram counts on the pass's grid (finite values)
	sat    int64           // saturated values
}

// smallHist is the tensor size (values) up to which a pass counts its
// histogram in Go instead of through the kernel's count tables.
const smallHist = 1024

// tablePool recycles count tables.
var tablePool = sync.Pool{New: func() any { return make([]uint32, histTables*histStride) }}

// flushTables adds the count tables into counts and clears them.
func flushTables(counts *[HistBins]int64, tabs []uint32) {
	for t := range histTables {
		row := tabs[t*histStride : (t+1)*histStride]
		for k := range HistBins {
			counts[k] += int64(row[k])
		}
		clear(row)
	}
}

// chunkFlush is the number of chunks after which a worker empties its
// uint32 tables into int64 counts (2^30 values: no table entry can overflow).
const chunkFlush = 1 << 30 / fastChunk

// chunkPass runs the pass over one chunk, summed about its first finite value.
func chunkPass(x []float32, p passParams, tabs []uint32) (Moments, int64) {
	shift := float32(0)
	for _, v := range x {
		if v-v == 0 { // finite
			shift = v
			break
		}
	}
	p.sh = float64(shift)
	var l passLanes
	l.init()
	pass(x, &p, tabs, &l)
	if !p.noHist {
		var zeros uint32
		for _, z := range l.zeros {
			zeros += z
		}
		tabs[binOf(0, &p)] += zeros
	}
	return l.moments(x, p.sh), l.satCount()
}

// tensorPass computes moments, saturation count and histogram counts of x
// in one read, in parallel over whole chunks for large x; the results do not
// depend on the number of workers. p.sh is ignored (each chunk has its own).
func tensorPass(x []float32, p passParams) (r passResult) {
	nc := (len(x) + fastChunk - 1) / fastChunk
	if nc <= 1 {
		if p.noHist {
			r.mom, r.sat = chunkPass(x, p, nil)
			return r
		}
		if len(x) <= smallHist {
			// the moments by the kernel, the few bins here: no count tables
			// to clear and flush (cache misses after a layer's weights have
			// streamed through cost more than counting)
			p.noHist = true
			r.mom, r.sat = chunkPass(x, p, nil)
			for _, v := range x {
				if f := float64(v); f-f == 0 { // finite
					r.counts[binOf(f, &p)]++
				}
			}
			return r
		}
		tabs := tablePool.Get().([]uint32)
		r.mom, r.sat = chunkPass(x, p, tabs)
		flushTables(&r.counts, tabs)
		tablePool.Put(tabs)
		return r
	}
	parts := make([]Moments, nc)
	workers := 1
	if len(x) >= fastParallelMin {
		workers = min(runtime.GOMAXPROCS(0), nc)
	}
	res := make([]passResult, workers)
	each := func(w int) {
		var tabs []uint32
		if !p.noHist {
			tabs = tablePool.Get().([]uint32)
			defer tablePool.Put(tabs)
		}
		rw := &res[w]
		k := 0
		for ci := w; ci < nc; ci += workers {
			var sat int64
			parts[ci], sat = chunkPass(x[ci*fastChunk:min(len(x), (ci+1)*fastChunk)], p, tabs)
			rw.sat += sat
			if k++; k == chunkFlush && tabs != nil {
				flushTables(&rw.counts, tabs)
				k = 0
			}
		}
		if tabs != nil {
			flushTables(&rw.counts, tabs)
		}
	}
	par.Do(workers, each)
	r.mom = NewMoments()
	for _, pm := range parts {
		r.mom.Merge(pm)
	}
	for _, rw := range res {
		r.sat += rw.sat
		for k, c := range rw.counts {
			r.counts[k] += c
		}
	}
	return r
}

// satBounds maps an activation's saturation rule to the inclusive bounds of
// passParams: a strict bound v < lo becomes v ≤ the float32 below lo (the
// same set for every non-NaN float32), and a rule that can never match, or
// no rule, becomes NaN.
func (a actInfo) satBounds() (lo, hi float32) {
	nan := float32(math.NaN())
	if !a.hasSat {
		return nan, nan
	}
	lo, hi = float32(a.satLo), float32(a.satHi)
	if a.strict {
		if math.IsInf(float64(lo), -1) {
			lo = nan // v < −Inf never holds
		} else {
			lo = math.Nextafter32(lo, float32(math.Inf(-1)))
		}
		if math.IsInf(float64(hi), 1) {
			hi = nan
		} else {
			hi = math.Nextafter32(hi, float32(math.Inf(1)))
		}
	}
	return lo, hi
}
