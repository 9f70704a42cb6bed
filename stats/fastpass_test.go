package stats

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"testing"
)

func fastData(rng *rand.Rand, n int, offset float64, specials bool) []float32 {
	x := make([]float32, n)
	sp := []float32{0, float32(math.Copysign(0, -1)), float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))}
	for i := range x {
		switch {
		case rng.IntN(4) == 0:
			x[i] = 0 // ReLU-like zeros
		case specials && rng.IntN(3000) == 0:
			x[i] = sp[rng.IntN(len(sp))]
		default:
			x[i] = float32(offset + rng.NormFloat64()*3)
		}
	}
	return x
}

func momentsClose(t *testing.T, what string, got, want Moments) {
	t.Helper()
	if got.N != want.N || got.Zeros != want.Zeros || got.Nonfinite != want.Nonfinite || got.Min != want.Min || got.Max != want.Max {
		t.Fatalf("%s: got %+v, want %+v", what, got, want)
	}
	if want.N == 0 {
		return
	}
	if math.Abs(got.Mean-want.Mean) > 1e-9*(1+math.Abs(want.Mean)) || math.Abs(got.M2-want.M2) > 1e-8*(1+want.M2) {
		t.Fatalf("%s: mean %.15g M2 %.15g, want %.15g %.15g", what, got.Mean, got.M2, want.Mean, want.M2)
	}
}

func TestFastMomentsMatchesAddFloat32(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, n := range []int{0, 1, 3, 4, 7, 100, fastChunk - 1, fastChunk, fastChunk + 5, 3*fastChunk + 1, fastParallelMin + 12345} {
		for _, offset := range []float64{0, 1e4} {
			for _, specials := range []bool{false, true} {
				x := fastData(rng, n, offset, specials)
				want := NewMoments()
				want.AddFloat32(x)
				momentsClose(t, "fast", FastMoments(x), want)
			}
		}
	}
	negZero := float32(math.Copysign(0, -1))
	for _, x := range [][]float32{
		{0, negZero, 1, 2, 3}, {negZero, 0, 1, 2, 3}, {1, 2, 0, 3, 4}, {negZero, 5, 6, 7},
		{0, negZero, -1, -2}, {negZero, 0, -1, -2, -3}, {-1, negZero, -3, -4}, {0, -5, -6, -7, -8},
		{0, negZero}, {negZero, 0}, {negZero}, {0},
	} {
		want := NewMoments()
		want.AddFloat32(x)
		got := FastMoments(x)
		momentsClose(t, "signed zeros", got, want)
		if math.Signbit(got.Min) != math.Signbit(want.Min) || math.Signbit(got.Max) != math.Signbit(want.Max) {
			t.Fatalf("%v: min %g max %g, want %g %g", x, got.Min, got.Max, want.Min, want.Max)
		}
	}
	allBad := []float32{float32(math.NaN()), float32(math.Inf(1))}
	want := NewMoments()
	want.AddFloat32(allBad)
	momentsClose(t, "all non-finite", FastMoments(allBad), want)
}

func TestFastMomentsIndependentOfWorkers(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	x := fastData(rng, 4*fastParallelMin+77, 0.5, true)
	a := FastMoments(x)
	old := runtime.GOMAXPROCS(1)
	b := FastMoments(x)
	runtime.GOMAXPROCS(3)
	c := FastMoments(x)
	runtime.GOMAXPROCS(old)
	if a != b || a != c {
		t.Fatalf("results depend on workers: %+v %+v %+v", a, b, c)
	}
}

func TestFastUnitScansMatch(t *testing.T) {
	for _, inner := range []int{1, 3, 15, 37} {
		testFastUnitScan(t, 13, inner)
	}
}

func testFastUnitScan(t *testing.T, units, inner int) {
	rng := rand.New(rand.NewPCG(7, 8))
	x := fastData(rng, 3*units*inner, -2, true)
	for u := 0; u < units; u += 3 { // some units never positive
		for o := 0; o < 3; o++ {
			for i := 0; i < inner; i++ {
				x[o*units*inner+u*inner+i] = -float32(rng.Float64())
			}
		}
	}
	x[5*inner+inner/2] = float32(math.NaN()) // a NaN next to positives in a dead unit's neighbour
	a, b := make([]bool, units), make([]bool, units)
	everPositive(a, x, units, inner)
	everPositivePending(b, notPositive(b), x, units, inner)
	for u := range a {
		if a[u] != b[u] {
			t.Fatalf("inner %d, unit %d: fast %v, want %v", inner, u, b[u], a[u])
		}
	}
}

func benchStats(b *testing.B, f func(x []float32)) {
	for _, n := range []int{1 << 16, 1 << 22} {
		x := fastData(rand.New(rand.NewPCG(1, 2)), n, 0.1, false)
		b.Run(map[int]string{1 << 16: "256KiB", 1 << 22: "16MiB"}[n], func(b *testing.B) {
			b.SetBytes(int64(4 * n))
			for b.Loop() {
				f(x)
			}
		})
	}
}

// BenchmarkFastMoments reports the one-pass moments in MB/s (go test's
// throughput unit, 10⁶ bytes of float32 input per second).
func BenchmarkFastMoments(b *testing.B) { benchStats(b, func(x []float32) { FastMoments(x) }) }

// BenchmarkAddFloat32 is the two-pass moments it replaces.
func BenchmarkAddFloat32(b *testing.B) {
	benchStats(b, func(x []float32) { m := NewMoments(); m.AddFloat32(x) })
}

func BenchmarkHistogram(b *testing.B) {
	benchStats(b, func(x []float32) { var h Histogram; h.AddFloat32(x, -20, 20) })
}

func BenchmarkEverPositiveFast(b *testing.B) {
	benchStats(b, func(x []float32) {
		ever := make([]bool, 64)
		everPositivePending(ever, notPositive(ever), x, 64, len(x)/64)
	})
}

func BenchmarkCountSaturated(b *testing.B) {
	ai := actInfo{satLo: -0.99, satHi: 0.99, strict: true}
	benchStats(b, func(x []float32) { countSaturated(x, ai) })
}

// everPositive is the plain reference scan for everPositivePending: it sets ever[u] when any element of unit u is > 0; data is laid
// out as [outer, units, inner].
func everPositive(ever []bool, x []float32, units, inner int) {
	block := units * inner
	for o := 0; o+block <= len(x); o += block {
		for u := 0; u < units; u++ {
			if ever[u] {
				continue
			}
			for _, v := range x[o+u*inner : o+(u+1)*inner] {
				if v > 0 {
					ever[u] = true
					break
				}
			}
		}
	}
}

// countSaturated is the plain reference count of saturated values.
func countSaturated(x []float32, a actInfo) int64 {
	var n int64
	lo, hi := float32(a.satLo), float32(a.satHi)
	if a.strict {
		for _, v := range x {
			if v < lo || v > hi {
				n++
			}
		}
	} else {
		for _, v := range x {
			if v <= lo || v >= hi {
				n++
			}
		}
	}
	return n
}

// columnMoments is columnMomentsInto's moments of x alone.
func columnMoments(x []float32, ch int) []Moments {
	out := make([]Moments, ch)
	for c := range out {
		out[c] = NewMoments()
	}
	columnMomentsInto(out, x, ch)
	return out
}

// columnMoments agrees with the two-pass AddFloat32 (the reference) on
// every column: counts exactly, mean and variance to 1e-12 relative, with
// NaN, ±Inf, −0 and a constant column among them.
func TestColumnMomentsMatchesTwoPass(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	const rows, ch = 37, 9
	x := make([]float32, rows*ch)
	for i := range x {
		x[i] = float32(r.NormFloat64()*3 + 100)
	}
	x[5*ch+2] = float32(math.NaN())
	x[7*ch+3] = float32(math.Inf(-1))
	for rr := 0; rr < rows; rr++ {
		x[rr*ch+4] = 2.5                           // constant
		x[rr*ch+5] = float32(math.Copysign(0, -1)) // all −0
	}
	checkColumns(t, columnMoments(x, ch), x, ch)
	if fmt.Sprint(columnMoments(nil, 3)[0].N) != "0" {
		t.Fatal("an empty sample must give empty moments")
	}
}

// Fed batch by batch (uneven batches, a NaN in one batch of one column, −0
// and +0 in another, a column far from zero), columnMomentsInto agrees with
// the two-pass AddFloat32 over each whole column (the reference): counts,
// extremes and the sign of zero extremes exactly, mean to 1e-12 and
// variance to 1e-9 relative.
func TestColumnMomentsIntoAcrossBatches(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 6))
	const rows, ch = 61, 5
	x := make([]float32, rows*ch)
	for i := range x {
		x[i] = float32(r.NormFloat64())
	}
	for rr := 0; rr < rows; rr++ {
		x[rr*ch+2] = float32(1e4 + r.NormFloat64()) // far from zero
		x[rr*ch+3] = float32(math.Copysign(0, float64(rr%3-1)))
	}
	x[20*ch+1] = float32(math.NaN())
	acc := make([]Moments, ch)
	for c := range acc {
		acc[c] = NewMoments()
	}
	for _, b := range [][2]int{{0, 1}, {1, 9}, {9, 30}, {30, 31}, {31, rows}} {
		columnMomentsInto(acc, x[b[0]*ch:b[1]*ch], ch)
	}
	checkColumns(t, acc, x, ch)
}

// checkColumns compares got, the moments of each of the ch columns of x,
// with the two-pass AddFloat32 of the column (the reference): counts and
// extremes exactly (the sign of a zero extreme too), mean to 1e-12 and
// variance to 1e-9 relative.
func checkColumns(t *testing.T, got []Moments, x []float32, ch int) {
	t.Helper()
	rows := len(x) / ch
	for c := 0; c < ch; c++ {
		col := make([]float32, rows)
		for rr := range col {
			col[rr] = x[rr*ch+c]
		}
		want := NewMoments()
		want.AddFloat32(col)
		g := got[c]
		if g.N != want.N || g.Zeros != want.Zeros || g.Nonfinite != want.Nonfinite ||
			math.Float64bits(g.Min) != math.Float64bits(want.Min) || math.Float64bits(g.Max) != math.Float64bits(want.Max) {
			t.Fatalf("column %d: %+v, want %+v", c, g, want)
		}
		if want.N > 0 && (math.Abs(g.Mean-want.Mean) > 1e-12*math.Abs(want.Mean) || math.Abs(g.Var()-want.Var()) > 1e-9*(want.Var()+1e-12)) {
			t.Fatalf("column %d: mean %g var %g, want %g %g", c, g.Mean, g.Var(), want.Mean, want.Var())
		}
	}
}
