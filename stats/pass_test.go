package stats

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"testing"
	"unsafe"

	"github.com/vitals-health/vitals/tensor"
)

// The assembly reads passParams and passLanes by offset.
func TestPassLayout(t *testing.T) {
	var p passParams
	var l passLanes
	got := []uintptr{unsafe.Offsetof(p.lo), unsafe.Offsetof(p.inv), unsafe.Offsetof(p.satLo), unsafe.Offsetof(p.satHi), unsafe.Offsetof(p.noHist),
		unsafe.Offsetof(p.f32), unsafe.Offsetof(p.histOnly), unsafe.Offsetof(p.noSat), unsafe.Offsetof(p.scale), unsafe.Offsetof(p.binLo), unsafe.Offsetof(p.binHi), unsafe.Offsetof(p.base), unsafe.Offsetof(p.tiny), unsafe.Offsetof(p.top),
		unsafe.Offsetof(l.q), unsafe.Offsetof(l.mn), unsafe.Offsetof(l.mx), unsafe.Offsetof(l.zeros), unsafe.Offsetof(l.negz), unsafe.Offsetof(l.nonfin), unsafe.Offsetof(l.sat)}
	want := []uintptr{8, 16, 24, 28, 32, 33, 34, 35, 36, 40, 44, 48, 52, 56, 128, 256, 320, 384, 448, 512, 576}
	if !slices.Equal(got, want) {
		t.Fatalf("offsets %v, want %v", got, want)
	}
}

// passData is random data with ReLU-like zeros, −0 and, with specials, NaN,
// ±Inf and a subnormal.
func passData(rng *rand.Rand, n int, specials bool) []float32 {
	return passDataHuge(rng, n, specials, false)
}

// passDataHuge is passData with ±MaxFloat32 among the specials when huge.
func passDataHuge(rng *rand.Rand, n int, specials, huge bool) []float32 {
	x := make([]float32, n)
	negZero := float32(math.Copysign(0, -1))
	sp := []float32{float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1)), 1e-45}
	if huge {
		sp = append(sp, math.MaxFloat32, -math.MaxFloat32)
	}
	for i := range x {
		switch r := rng.IntN(100); {
		case r < 25:
			x[i] = 0
		case r < 28:
			x[i] = negZero
		case specials && r < 31:
			x[i] = sp[rng.IntN(len(sp))]
		case r < 40:
			x[i] = 6 // a saturation bound, hit exactly
		default:
			x[i] = float32(rng.NormFloat64() * 3)
		}
	}
	return x
}

func lanesEqual(a, b *passLanes) bool {
	for j := range 16 {
		if math.Float64bits(a.s[j]) != math.Float64bits(b.s[j]) || math.Float64bits(a.q[j]) != math.Float64bits(b.q[j]) ||
			math.Float32bits(a.mn[j]) != math.Float32bits(b.mn[j]) || math.Float32bits(a.mx[j]) != math.Float32bits(b.mx[j]) {
			return false
		}
	}
	total := func(c [16]uint32) (n uint32) {
		for _, v := range c {
			n += v
		}
		return n
	}
	return total(a.zeros) == total(b.zeros) && total(a.negz) == total(b.negz) && total(a.nonfin) == total(b.nonfin) && total(a.sat) == total(b.sat)
}

// Each vector kernel the CPU runs (level 2: AVX-512, level 1: AVX2), with
// its Go tail, gives bit for bit the float lanes, and exactly the counts and
// per-bin table sums, of the pure-Go pass, on odd lengths, special values, all-equal data and windows
// that do or do not cover the data.
func TestPassVecMatchesGo(t *testing.T) {
	if passLevel == passNone {
		t.Skip("no vector kernel on this CPU")
	}
	best := passLevel
	defer func() { passLevel = best }()
	for level := best; level > passNone; level-- {
		passLevel = level
		t.Run(fmt.Sprintf("level%d", level), testPassVecMatchesGo)
	}
}

func testPassVecMatchesGo(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	nan := float32(math.NaN())
	params := []passParams{
		{sh: 0.5, lo: -16, inv: 4, satLo: 0, satHi: 6},
		{sh: -1, lo: -2, inv: 32, satLo: nan, satHi: 6},                  // window narrower than the data
		{sh: 0, lo: 1e30, inv: 1e-20, satLo: -0.99, satHi: nan},          // window far off
		{sh: 3, lo: -math.Ldexp(64, -3), inv: 8, satLo: nan, satHi: nan}, // no saturation rule
		{sh: 0, noHist: true, satLo: nan, satHi: nan},
		{sh: 0.5, lo: -16, inv: 4, satLo: 0, satHi: 6, histOnly: true},        // tables and ±0 count only
		{sh: 0, lo: 1e30, inv: 1e-20, satLo: nan, satHi: nan, histOnly: true}, // the same through the float64 bins
	}
	lengths := []int{0, 1, 15, 16, 17, 31, 33, 100, 1000, 4099, fastChunk}
	for _, n := range lengths {
		for _, specials := range []bool{false, true} {
			data := [][]float32{passDataHuge(rng, n, specials, true)}
			eq := make([]float32, n)
			for i := range eq {
				eq[i] = 2.75
			}
			data = append(data, eq)
			for di, x := range data {
				for pi, p := range params {
					var a, b passLanes
					a.init()
					b.init()
					ta, tb := make([]uint32, histTables*histStride), make([]uint32, histTables*histStride)
					if p.noHist {
						ta, tb = nil, nil
					}
					pass(x, &p, ta, &a)
					passGo(x, &p, tb, &b)
					if p.histOnly {
						// the AVX2 kernel takes the moments anyway: only the
						// tables and the ±0 count are defined
						var za, zb uint32
						for j := range 16 {
							za, zb = za+a.zeros[j], zb+b.zeros[j]
						}
						if za != zb || !slices.Equal(binTotals(ta), binTotals(tb)) {
							t.Fatalf("n=%d specials=%v data %d params %d (histogram only): zeros %d, want %d, or tables differ", n, specials, di, pi, za, zb)
						}
						continue
					}
					if !lanesEqual(&a, &b) {
						t.Fatalf("n=%d specials=%v data %d params %d: lanes\n%+v\nwant\n%+v", n, specials, di, pi, a, b)
					}
					if !slices.Equal(binTotals(ta), binTotals(tb)) {
						t.Fatalf("n=%d specials=%v data %d params %d: tables differ", n, specials, di, pi)
					}
				}
			}
		}
	}
}

// The AVX-512 kernel's float32 bins (passParams.binF32) are the float64
// formula's also where that formula rounds: a tiny negative value beside a
// window starting below zero (a GELU output of −1e-20 with lo = −0.5: in
// float64, −1e-20 + 0.5 rounds to 0.5, the left edge of the bin of 0, one
// bin above the exact one) and values on and next to bin edges. It fails
// when the kernel's fall-back for values below tiny is taken out.
func TestPassF32BinsMatchFloat64(t *testing.T) {
	if passLevel == passNone {
		t.Skip("no vector kernel on this CPU")
	}
	nan := float32(math.NaN())
	p := passParams{lo: -0.5, inv: 128, satLo: nan, satHi: nan}
	q := p
	q.binF32()
	if !q.f32 || q.base != -64 {
		t.Fatalf("window lo −0.5, inv 128: f32 %v base %d, want the float32 bins with base −64", q.f32, q.base)
	}
	if binOf(-1e-20, &p) != 64 {
		t.Fatalf("float64 bin of −1e-20 is %d; this test expects the rounding to the bin of 0 (64)", binOf(-1e-20, &p))
	}
	rng := rand.New(rand.NewPCG(5, 6))
	x := make([]float32, 4096)
	for i := range x {
		switch rng.IntN(4) {
		case 0:
			x[i] = -float32(math.Ldexp(1+rng.Float64(), -40-rng.IntN(60))) // tiny negative
		case 1:
			k := rng.IntN(140) - 70 // a bin edge k/128 or the float32 just beside it
			e := float32(k) / 128
			x[i] = []float32{e, math.Nextafter32(e, -1), math.Nextafter32(e, 1)}[rng.IntN(3)]
		default:
			x[i] = float32(rng.NormFloat64() * 0.2)
		}
	}
	for _, n := range []int{16, 64 * 16, len(x)} {
		var a, b passLanes
		a.init()
		b.init()
		ta, tb := make([]uint32, histTables*histStride), make([]uint32, histTables*histStride)
		pass(x[:n], &p, ta, &a)
		passGo(x[:n], &p, tb, &b)
		if !slices.Equal(binTotals(ta), binTotals(tb)) {
			t.Fatalf("n=%d: bins %v\nwant %v", n, binTotals(ta), binTotals(tb))
		}
	}
}

// The pass's counts equal the plain per-value formulas: histogram bins of
// countInto, saturation of countSaturated, zeros and non-finite of AddFloat32;
// with each vector kernel the CPU has and with the pure-Go pass.
func TestTensorPassMatchesReference(t *testing.T) {
	best := passLevel
	defer func() { passLevel = best }()
	for level := best; level >= passNone; level-- {
		passLevel = level
		t.Run(fmt.Sprintf("level%d", level), testTensorPassMatchesReference)
	}
}

func testTensorPassMatchesReference(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	acts := []actInfo{
		{hasSat: true, satLo: math.Inf(-1), satHi: 6},           // ReLU6
		{hasSat: true, satLo: -0.99, satHi: 0.99, strict: true}, // tanh
		{hasSat: true, satLo: 0, satHi: 1},                      // hard sigmoid
		{hasSat: true, satLo: 0, satHi: 6, strict: true},
		{},
	}
	for _, n := range []int{1, 17, smallHist, smallHist + 16, 5000, fastChunk + 3, fastParallelMin + 4321} {
		for _, specials := range []bool{false, true} {
			x := passData(rng, n, specials)
			ref := NewMoments()
			ref.AddFloat32(x)
			var h Histogram
			if !h.prepare(ref.Min, ref.Max) {
				continue
			}
			want := make([]int64, HistBins)
			h.countInto(want, x)
			for _, a := range acts {
				p := passParams{lo: h.Lo, inv: 1 / h.Width}
				p.satLo, p.satHi = a.satBounds()
				r := tensorPass(x, p)
				if !slices.Equal(r.counts[:], want) {
					t.Fatalf("n=%d: counts %v, want %v", n, r.counts, want)
				}
				if ws := countSaturated(x, a); a.hasSat && r.sat != ws || !a.hasSat && r.sat != 0 {
					t.Fatalf("n=%d %+v: %d saturated, want %d", n, a, r.sat, ws)
				}
				momentsClose(t, fmt.Sprintf("n=%d", n), r.mom, ref)
			}
		}
	}
}

// twoPassObserve is the former statistics of one batch: moments first, then
// the histogram on the grid widened for them, saturation and ever-positive
// flags from a second read.
func twoPassObserve(la *layerAcc, x []float32, units, inner int) {
	b := NewMoments()
	b.AddFloat32(x)
	la.mom.Merge(b)
	if la.hist.prepare(b.Min, b.Max) {
		la.hist.countInto(la.hist.Counts, x)
	}
	if la.act.hasSat {
		la.sat += countSaturated(x, la.act)
		la.satN += int64(len(x))
	}
	if len(la.everPos) != units {
		la.everPos = make([]bool, units)
	}
	if la.act.kind == ActReLU {
		everPositive(la.everPos, x, units, inner)
	}
}

// The one-pass observe gives the same histogram (grid and counts),
// saturation counts and ever-positive flags as the two-pass one, and
// moments within rounding, on random batch splits where the grid sometimes
// changes from one batch to the next and sometimes stays.
func TestObserveMatchesTwoPass(t *testing.T) {
	rng := rand.New(rand.NewPCG(15, 16))
	const units, inner = 24, 1500
	c := &Collector{perChanWanted: map[string]bool{}}
	for trial := range 6 {
		act := actInfo{kind: ActReLU, hasSat: true, satLo: math.Inf(-1), satHi: 6}
		if trial%2 == 1 {
			act = actInfo{kind: ActSaturating, hasSat: true, satLo: -0.99, satHi: 0.99, strict: true}
		}
		got := &layerAcc{mom: NewMoments(), act: act, unitKind: 1}
		want := &layerAcc{mom: NewMoments(), act: act, unitKind: 1}
		changes := 0
		for batch := range 12 {
			nb := 1 + rng.IntN(8) // items in the batch
			x := passData(rng, nb*units*inner, trial >= 4)
			scale := 1.0
			if rng.IntN(3) == 0 {
				scale = math.Ldexp(1, rng.IntN(5)) // sometimes widens the range
			}
			for i := range x {
				x[i] *= float32(scale)
				if i/inner%units < 3 {
					x[i] = -float32(math.Abs(float64(x[i]))) // dead units
				}
			}
			if batch == 5 && trial == 2 {
				for i := range x {
					x[i] = float32(math.NaN()) // a batch without finite values
				}
			}
			e0, s0 := got.hist.Exp, got.hist.Start
			c.observe(got, tensor.From(x, nb, units, inner))
			twoPassObserve(want, x, units, inner)
			if batch > 0 && (got.hist.Exp != e0 || got.hist.Start != s0) {
				changes++
			}
			if got.hist.Exp != want.hist.Exp || got.hist.Start != want.hist.Start || !slices.Equal(got.hist.Counts, want.hist.Counts) {
				t.Fatalf("trial %d batch %d: histogram %+v, want %+v", trial, batch, got.hist, want.hist)
			}
			if got.hist.Min != want.hist.Min || got.hist.Max != want.hist.Max {
				t.Fatalf("trial %d batch %d: range [%g, %g], want [%g, %g]", trial, batch, got.hist.Min, got.hist.Max, want.hist.Min, want.hist.Max)
			}
			if got.sat != want.sat || got.satN != want.satN || !slices.Equal(got.everPos, want.everPos) {
				t.Fatalf("trial %d batch %d: sat %d/%d ever %v, want %d/%d %v", trial, batch, got.sat, got.satN, got.everPos, want.sat, want.satN, want.everPos)
			}
			momentsClose(t, fmt.Sprintf("trial %d batch %d", trial, batch), got.mom, want.mom)
		}
		if changes == 0 || changes == 11 {
			t.Fatalf("trial %d: grid changed after %d of 11 batches; the test needs both cases", trial, changes)
		}
	}
}

// The pass gives identical results whatever the number of workers.
func TestTensorPassIndependentOfWorkers(t *testing.T) {
	rng := rand.New(rand.NewPCG(17, 18))
	x := passData(rng, 3*fastParallelMin+77, true)
	p := passParams{lo: -64, inv: 1, satLo: -1, satHi: 6}
	a := tensorPass(x, p)
	old := runtime.GOMAXPROCS(1)
	b := tensorPass(x, p)
	runtime.GOMAXPROCS(3)
	c := tensorPass(x, p)
	runtime.GOMAXPROCS(old)
	if a != b || a != c {
		t.Fatalf("results depend on workers:\n%+v\n%+v\n%+v", a.mom, b.mom, c.mom)
	}
}

// benchGBs times f, a pass over x, and reports GB/s (10⁹ bytes of float32
// input per second) besides go test's MB/s.
func benchGBs(b *testing.B, x []float32, f func()) {
	b.SetBytes(int64(4 * len(x)))
	for b.Loop() {
		f()
	}
	b.ReportMetric(float64(4*len(x))*float64(b.N)/b.Elapsed().Seconds()/1e9, "GB/s")
}

// benchSizes runs a benchmark on a 256 KiB (cache-resident) and a 16 MiB
// slice of ReLU-like data (a quarter zeros).
func benchSizes(b *testing.B, f func(b *testing.B, x []float32)) {
	for _, n := range []int{1 << 16, 1 << 22} {
		x := fastData(rand.New(rand.NewPCG(1, 2)), n, 0.1, false)
		b.Run(fmt.Sprintf("%dKiB", n/256), func(b *testing.B) { f(b, x) })
	}
}

var benchParams = passParams{lo: -32, inv: 2, satLo: float32(math.Inf(-1)), satHi: 6}

// BenchmarkStatsPass is the fused pass (moments, histogram, saturation) of
// one tensor as observe runs it once the grid is known, on all cores.
func BenchmarkStatsPass(b *testing.B) {
	benchSizes(b, func(b *testing.B, x []float32) { benchGBs(b, x, func() { tensorPass(x, benchParams) }) })
}

// BenchmarkStatsPassOneCore is the fused pass on one core.
func BenchmarkStatsPassOneCore(b *testing.B) {
	tabs := make([]uint32, histTables*histStride)
	benchSizes(b, func(b *testing.B, x []float32) {
		benchGBs(b, x, func() {
			for o := 0; o < len(x); o += fastChunk {
				chunkPass(x[o:min(len(x), o+fastChunk)], benchParams, tabs)
			}
		})
	})
}

// BenchmarkStatsPassMomentsOneCore is the pass without its histogram (the
// first batch's pass and FastMoments) on one core.
func BenchmarkStatsPassMomentsOneCore(b *testing.B) {
	p := benchParams
	p.noHist = true
	benchSizes(b, func(b *testing.B, x []float32) {
		benchGBs(b, x, func() {
			for o := 0; o < len(x); o += fastChunk {
				chunkPass(x[o:min(len(x), o+fastChunk)], p, nil)
			}
		})
	})
}

// BenchmarkStatsPassGo is the pure-Go fallback of the fused pass on one core.
func BenchmarkStatsPassGo(b *testing.B) {
	tabs := make([]uint32, histTables*histStride)
	benchSizes(b, func(b *testing.B, x []float32) {
		benchGBs(b, x, func() {
			var l passLanes
			l.init()
			passGo(x, &benchParams, tabs, &l)
		})
	})
}

// BenchmarkObserve is all the statistics of one ReLU6 node output
// [N, 32, H, W] after the first batch: moments, histogram, saturation and
// ever-positive units.
func BenchmarkObserve(b *testing.B) {
	c := &Collector{perChanWanted: map[string]bool{}}
	benchSizes(b, func(b *testing.B, x []float32) {
		la := &layerAcc{mom: NewMoments(), act: actInfo{kind: ActReLU, hasSat: true, satLo: math.Inf(-1), satHi: 6}, unitKind: 1}
		t := tensor.From(x, len(x)/(32*1024), 32, 32, 32)
		c.observe(la, t) // the first batch sets the grid
		benchGBs(b, x, func() { c.observe(la, t) })
	})
}

// binTotals sums count tables per bin (the junk bin included, the unused
// entries after it not).
func binTotals(tabs []uint32) []uint32 {
	if tabs == nil {
		return nil
	}
	s := make([]uint32, HistBins+1)
	for t := range histTables {
		for k := range HistBins + 1 {
			s[k] += tabs[t*histStride+k]
		}
	}
	return s
}

// BenchmarkObserveFeatures is all the statistics of one small ReLU output
// [8, 2048] of a fully connected layer (one MLP batch), where fixed costs
// per tensor, not bandwidth, decide.
func BenchmarkObserveFeatures(b *testing.B) {
	c := &Collector{perChanWanted: map[string]bool{}}
	x := fastData(rand.New(rand.NewPCG(3, 4)), 8*2048, 0, false)
	for i := range x {
		x[i] = max(x[i], 0)
	}
	la := &layerAcc{mom: NewMoments(), act: actInfo{kind: ActReLU}, unitKind: 2}
	t := tensor.From(x, 8, 2048)
	c.observe(la, t)
	for b.Loop() {
		c.observe(la, t)
	}
}

// BenchmarkColumnMoments is the per-feature moments of one tabular input
// batch [8, 784], a different batch each time (64 in turn, so that branch
// predictors do not learn the data).
func BenchmarkColumnMoments(b *testing.B) {
	x := fastData(rand.New(rand.NewPCG(3, 4)), 64*8*784, 0, false)
	acc := make([]Moments, 784)
	for i := range acc {
		acc[i] = NewMoments()
	}
	i := 0
	for b.Loop() {
		xb := x[i*8*784 : (i+1)*8*784]
		columnMomentsInto(acc, xb, 784)
		i = (i + 1) % 64
	}
}

// BenchmarkObserveFirstBatch is all the statistics of a layer's first
// batch (a ReLU6 output [N, 32, H, W]): a pass for the moments and range,
// then the histogram on the grid they give.
func BenchmarkObserveFirstBatch(b *testing.B) {
	c := &Collector{perChanWanted: map[string]bool{}}
	benchSizes(b, func(b *testing.B, x []float32) {
		t := tensor.From(x, len(x)/(32*1024), 32, 32, 32)
		benchGBs(b, x, func() {
			la := &layerAcc{mom: NewMoments(), act: actInfo{kind: ActReLU, hasSat: true, satLo: math.Inf(-1), satHi: 6}, unitKind: 1}
			c.observe(la, t)
		})
	})
}

// BenchmarkStatsPassNoSatOneCore is the fused pass on one core for a layer
// with no saturation rule (most layers).
func BenchmarkStatsPassNoSatOneCore(b *testing.B) {
	tabs := make([]uint32, histTables*histStride)
	p := benchParams
	p.satLo, p.satHi = float32(math.NaN()), float32(math.NaN())
	benchSizes(b, func(b *testing.B, x []float32) {
		benchGBs(b, x, func() {
			for o := 0; o < len(x); o += fastChunk {
				chunkPass(x[o:min(len(x), o+fastChunk)], p, tabs)
			}
		})
	})
}
