package stats

import (
	"math"

	"github.com/vitals-health/vitals/loader"
)

// Outputs that are an exact power-of-two multiple of an observed value.
//
// y = x·2^k (Mul by a constant scalar 2^k, or Div by 2^−k: GELU's final
// ½, attention's 1/√64 = 1/8) holds x's values scaled exactly, as long as
// no product overflows or falls below the smallest normal float32. Every
// operation of the fused pass (float64 conversion, shift, sums, fused
// squares, Chan's merge, division by the count) then gives 2^k times
// x's result, rounding included (scaling by a power of two commutes with
// rounding), and the histogram grid of the scaled range is x's grid with
// its exponent raised by k (histGrid), on which every value keeps its
// bin. So y's batch statistics are x's scaled: Mean·2^k, M2·4^k, Min and
// Max·2^k, the same counts, bit for bit what a pass over y would give.
//
// Exactness is checked per batch, never assumed: for k > 0 the largest
// |x|·2^k must stay below the largest float32; for k < 0, y must hold no
// subnormal value and no zero that x did not have (expZeroCount(y) =
// Zeros(x): a product that rounded lands in one of those). The histogram
// grid y is about to use must be the scaled one. Otherwise y gets its own
// pass, as before.

// scaledSource finds, for a layer that is Mul(x, c) / Mul(c, x) with c a
// constant scalar 2^k (k ≠ 0), or Div(x, c) with c = 2^−k, the observed
// layer of x and k.
func (c *Collector) scaledSource(g *loader.Graph, la *layerAcc) (*layerAcc, int, bool) {
	n := la.node
	if n == nil || (n.Domain != "" && n.Domain != "ai.onnx") || len(n.Inputs) != 2 || len(n.Outputs) != 1 || la.output != n.Outputs[0] {
		return nil, 0, false
	}
	data, cst := n.Inputs[0], n.Inputs[1]
	switch n.OpType {
	case "Mul":
		if _, ok := constValue(g, data); ok {
			data, cst = cst, data
		}
	case "Div":
	default:
		return nil, 0, false
	}
	t, ok := constValue(g, cst)
	if !ok || t.Size() != 1 {
		return nil, 0, false
	}
	if _, isConst := constValue(g, data); isConst {
		return nil, 0, false
	}
	v := t.Float64At(0)
	fr, e := math.Frexp(v)
	if fr != 0.5 || v <= 0 {
		return nil, 0, false // not a positive power of two
	}
	k := e - 1
	if n.OpType == "Div" {
		k = -k
	}
	src := c.byOut[data]
	if src == nil {
		src = c.inputs[data]
	}
	if src == nil || k == 0 || k < -60 || k > 60 {
		return nil, 0, false
	}
	return src, k, true
}

// reuseScaled takes la's batch statistics from its scaleOf layer (see
// above) when that layer's last observation was of this batch with as
// many values, the values scale exactly and the grid is the scaled one;
// false when it cannot, and nothing is changed then.
func (c *Collector) reuseScaled(la *layerAcc, x []float32) bool {
	s := la.scaleOf
	if s == nil || !s.last.ok || len(x) == 0 || s.last.seq != la.batches || s.last.n != len(x) {
		return false
	}
	k := la.scaleExp
	sc := math.Ldexp(1, k)
	b := s.last.mom
	if k > 0 {
		amax := 0.0
		if b.N > 0 {
			amax = math.Max(math.Abs(b.Min), math.Abs(b.Max))
		}
		if amax*sc >= math.MaxFloat32 {
			return false
		}
	} else if expZeroCount(x) != b.Zeros {
		return false
	}
	bs := b
	bs.Mean, bs.M2 = b.Mean*sc, b.M2*(sc*sc)
	bs.Min, bs.Max = b.Min*sc, b.Max*sc
	if s.last.hasFinite {
		mn, mx := bs.Min, bs.Max
		if la.hist.Counts != nil {
			mn, mx = math.Min(la.hist.Min, mn), math.Max(la.hist.Max, mx)
		}
		if e, st := histGrid(mn, mx); e != s.last.exp+k || st != s.last.start {
			return false
		}
	}
	la.mom.Merge(bs)
	counts := s.last.counts
	if la.hist.prepare(bs.Min, bs.Max) {
		for i, n := range counts {
			la.hist.Counts[i] += n
		}
	} else {
		counts = [HistBins]int64{}
	}
	la.keepBatch(x, bs, &counts)
	c.reused.Add(1)
	return true
}

// expZeroCount is the number of values of x whose exponent bits are all
// zero: ±0 and the subnormal numbers.
func expZeroCount(x []float32) int64 {
	n, done := expZeroPrefix(x)
	for _, v := range x[done:] {
		if math.Float32bits(v)&0x7f800000 == 0 {
			n++
		}
	}
	return int64(n)
}
