package stats

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/tensor"
)

// Layers that are an exact power-of-two multiple of another (Mul by ½, Div
// by 8, a GELU-like Mul by ½ of an activation, Mul by 4) take their batch
// statistics from it, scaled. The reference is a collector that reads
// every layer (scaleOf cleared): every moment (bit for bit: scaling by a
// power of two commutes with rounding), grid, extreme, zero count and bin
// must be equal, over batches that widen the grid, an all-zero batch, a
// batch with NaN and ±Inf, and batches with values near the smallest
// normal float32, where halving rounds or underflows (those batches must
// fall back to a pass of their own), and a Mul by 3 never reuses.
func TestScaledLayersReuseExactly(t *testing.T) {
	b := modelbuild.New("scaled", 11)
	b.Input("x", []int{1, 64}, true)
	b.Init("half", []int{}, []float32{0.5})
	b.Init("eight", []int{1}, []float32{8})
	b.Init("four", []int{}, []float32{4})
	b.Init("three", []int{}, []float32{3})
	b.Node("Mul", "m_half", []string{"x", "half"}, []string{"h"})
	b.Node("Div", "d_eight", []string{"h", "eight"}, []string{"e"})
	b.Node("Mul", "m_four", []string{"four", "e"}, []string{"f"})
	b.Node("Mul", "m_three", []string{"x", "three"}, []string{"t"})
	b.Node("Add", "sum", []string{"f", "t"}, []string{"y"})
	b.Output("y")
	m, p := BuildPlan(t, b)
	reuse, plain := NewCollector(m, p), NewCollector(m, p)
	scaled := 0
	for _, la := range reuse.layers {
		if la.scaleOf != nil {
			scaled++
		}
	}
	if scaled != 3 {
		t.Fatalf("%d scaled layers found, want 3 (Mul ½, Div 8, Mul 4)", scaled)
	}
	for _, la := range plain.layers {
		la.scaleOf = nil
	}
	rng := rand.New(rand.NewPCG(3, 4))
	tiny := float32(math.Ldexp(1, -126)) // the smallest normal float32
	batches := [][]float32{}
	for k, scale := range []float32{1, 0, 0.25, 16, 1000} {
		x := make([]float32, 5*64)
		for i := range x {
			x[i] = scale * float32(rng.NormFloat64()+0.3*float64(k))
		}
		batches = append(batches, x)
	}
	nonfinite := make([]float32, 5*64)
	for i := range nonfinite {
		nonfinite[i] = float32(rng.NormFloat64())
	}
	nonfinite[7], nonfinite[100], nonfinite[200] = float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))
	near := make([]float32, 5*64)
	for i := range near {
		near[i] = tiny * float32(1+rng.IntN(7)) * 3 // halving and ÷8 round or underflow
	}
	batches = append(batches, nonfinite, near)
	fellBack := 0
	for _, x := range batches {
		before := reuse.reused.Load()
		for _, c := range []*Collector{reuse, plain} {
			in := map[string]*tensor.Tensor{"x": tensor.From(append([]float32(nil), x...), 5, 64)}
			c.AddInputs(in)
			if _, err := p.Run(in, c.Hook); err != nil {
				t.Fatal(err)
			}
			if err := c.Wait(); err != nil {
				t.Fatal(err)
			}
		}
		if reuse.reused.Load()-before < 3 {
			fellBack++
		}
	}
	if fellBack != 1 {
		t.Errorf("%d batches fell back to a pass for some scaled layer, want 1 (the one near the smallest normal)", fellBack)
	}
	for i, la := range reuse.layers {
		want := plain.layers[i]
		if math.Float64bits(la.mom.Mean) != math.Float64bits(want.mom.Mean) || math.Float64bits(la.mom.M2) != math.Float64bits(want.mom.M2) ||
			la.mom != want.mom || la.hist.Exp != want.hist.Exp || la.hist.Start != want.hist.Start ||
			la.hist.Min != want.hist.Min || la.hist.Max != want.hist.Max {
			t.Fatalf("%s: moments %+v grid %d/%d, want %+v %d/%d", la.output, la.mom, la.hist.Exp, la.hist.Start, want.mom, want.hist.Exp, want.hist.Start)
		}
		for k := range la.hist.Counts {
			if la.hist.Counts[k] != want.hist.Counts[k] {
				t.Fatalf("%s: bin %d has %d, want %d", la.output, k, la.hist.Counts[k], want.hist.Counts[k])
			}
		}
	}
}

// TestExpZeroCount: ±0 and subnormal values counted, normal ones and
// NaN/±Inf not, at every length around the vector kernel's 64-value rounds.
func TestExpZeroCount(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for _, n := range []int{0, 1, 63, 64, 65, 127, 128, 1000, 4099} {
		x := make([]float32, n)
		want := int64(0)
		for i := range x {
			switch rng.IntN(6) {
			case 0:
				x[i] = 0
				want++
			case 1:
				x[i] = float32(math.Copysign(0, -1))
				want++
			case 2:
				x[i] = math.Float32frombits(uint32(1 + rng.IntN(0x7fffff))) // subnormal
				want++
			case 3:
				x[i] = float32(math.Inf(1))
			case 4:
				x[i] = float32(math.NaN())
			default:
				x[i] = float32(rng.NormFloat64()) + 2
			}
		}
		if got := expZeroCount(x); got != want {
			t.Errorf("n=%d: %d values with zero exponent, want %d", n, got, want)
		}
	}
}
