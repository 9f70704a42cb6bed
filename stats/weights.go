package stats

import (
	"math"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

// weightOf locates the weight initializer of a linear node and how its rows
// (output units), fan-in and fan-out are laid out. Fan-out is taken as the
// training frameworks take it for their fan_out initialisers (dims[0]·∏k for
// a convolution, groups ignored).
//
//	Conv/ConvTranspose W: [M, C/g, k...]: rows = M filters, fan_in = C/g·∏k, fan_out = M·∏k (ConvTranspose: [C, M/g, k...], taken alike as dims[1]·∏k and dims[0]·∏k)
//	Gemm B: transB=1 → [N, K] rows = N, fan_in = K; transB=0 → [K, N] units are columns; fan_out = N
//	MatMul B (initializer): [K, N], fan_in = K, fan_out = N, units are columns
func weightOf(n *loader.Node, g *loader.Graph) (name string, w *tensor.Tensor, fanIn, fanOut int, byColumns bool, ok bool) {
	idx := 1
	switch n.OpType {
	case "Conv", "ConvTranspose":
	case "Gemm":
		if a := n.Attrs["transB"]; a == nil || a.I == 0 {
			byColumns = true
		}
	case "MatMul":
		byColumns = true
	default:
		return
	}
	if len(n.Inputs) <= idx {
		return
	}
	name = n.Inputs[idx]
	w, ok = constValue(g, name)
	if !ok || w.DType != tensor.Float32 || w.Rank() < 2 {
		// MatMul/Gemm whose first operand is the weight (x·Wᵀ exported as MatMul(W, x)) is rare; skip
		return "", nil, 0, 0, false, false
	}
	switch n.OpType {
	case "Conv", "ConvTranspose":
		fanIn, fanOut = w.Shape[1], w.Shape[0]
		for _, d := range w.Shape[2:] {
			fanIn *= d
			fanOut *= d
		}
	default:
		if w.Rank() != 2 {
			return "", nil, 0, 0, false, false
		}
		if byColumns {
			fanIn, fanOut = w.Shape[0], w.Shape[1]
		} else {
			fanIn, fanOut = w.Shape[1], w.Shape[0]
		}
	}
	return name, w, fanIn, fanOut, byColumns, true
}

// WeightStats computes, for every Conv/Gemm/MatMul weight, std, the gain
// g = std·√fan_in, g/√2 (He et al. 2015: Var[w] = 2/fan_in for ReLU) and g/1
// (Glorot & Bengio 2010: Var[w] ≈ 1/fan_in for tanh-like units), identical and
// all-zero rows (filters or output units), and NaN/Inf.
func WeightStats(g *loader.Graph, follow func(n *loader.Node) string) []report.Weight {
	var out []report.Weight
	seen := map[string]bool{}
	for _, n := range g.Nodes {
		name, w, fanIn, fanOut, byCols, ok := weightOf(n, g)
		if !ok || seen[name] {
			continue
		}
		seen[name] = true
		x := w.F32()
		m := FastMoments(x)
		rows, rowLen := w.Shape[0], len(x)/w.Shape[0]
		row := func(r int, buf []float32) []float32 { return x[r*rowLen : (r+1)*rowLen] }
		if byCols {
			cols := w.Shape[1]
			rows, rowLen = cols, w.Shape[0]
			row = func(r int, buf []float32) []float32 {
				for j := range buf {
					buf[j] = x[j*cols+r]
				}
				return buf
			}
		}
		ident, zero := identicalRows(rows, rowLen, row)
		std := m.Std()
		gain := std * math.Sqrt(float64(fanIn))
		wr := report.Weight{
			Name: name, Node: n.Name, Shape: append([]int{}, w.Shape...), FanIn: fanIn, FanOut: fanOut,
			Std: report.Num(std), Gain: report.Num(gain),
			ScaleVsHe: report.Num(gain / math.Sqrt2), ScaleVsXavier: report.Num(gain),
			IdenticalRows: ident, ZeroRows: zero, Rows: rows, Nonfinite: m.Nonfinite,
		}
		if follow != nil {
			wr.FollowedBy = follow(n)
		}
		out = append(out, wr)
	}
	return out
}

// identicalRows counts non-zero rows that equal at least one other row
// (every member of a group of equal rows counts), and all-zero rows. Rows are
// read through row (which may fill buf) and grouped by a 64-bit FNV-1a hash of
// their bit patterns; rows sharing a hash are compared value by value, so the
// weights are never copied whole.
func identicalRows(rows, rowLen int, row func(r int, buf []float32) []float32) (identical, zero int) {
	buf := make([]float32, rowLen)
	byHash := map[uint64][]int{}
	for r := 0; r < rows; r++ {
		v := row(r, buf)
		h := uint64(14695981039346656037)
		allZero := true
		for _, f := range v {
			if f != 0 {
				allZero = false
			}
			h ^= uint64(math.Float32bits(f))
			h *= 1099511628211
		}
		if allZero {
			zero++
			continue
		}
		byHash[h] = append(byHash[h], r)
	}
	for _, group := range byHash {
		if len(group) < 2 {
			continue
		}
		// split the group into classes of equal rows (one stored copy per class)
		var reps [][]float32
		var counts []int
		for _, r := range group {
			v := row(r, buf)
			found := false
			for ci, rep := range reps {
				if sameBits(rep, v) {
					counts[ci]++
					found = true
					break
				}
			}
			if !found {
				reps = append(reps, append([]float32(nil), v...))
				counts = append(counts, 1)
			}
		}
		for _, n := range counts {
			if n > 1 {
				identical += n
			}
		}
	}
	return identical, zero
}

// ParameterCount sums the element counts of all float initializers, of the
// float values held by Constant nodes (some exporters store every weight
// that way) and of the integer initializers that hold quantized weights or
// biases: the data input of a DequantizeLinear, the weight (and bias) inputs
// of QLinearConv, QLinearMatMul, QGemm, ConvInteger and MatMulInteger. Given
// a flat graph (probe.Flat) it counts those of the subgraphs too.
func ParameterCount(g *loader.Graph) int64 {
	quant := map[string]bool{}
	at := map[string][]int{"DequantizeLinear": {0}, "QLinearConv": {3, 8}, "QLinearMatMul": {0, 3}, "QGemm": {3, 6},
		"ConvInteger": {1}, "MatMulInteger": {0, 1}}
	for _, n := range g.Nodes {
		for _, i := range at[n.OpType] {
			if i < len(n.Inputs) && n.Inputs[i] != "" {
				quant[n.Inputs[i]] = true
			}
		}
	}
	var n int64
	for name, t := range g.Initializers {
		if t.DType.IsFloat() || quant[name] {
			n += int64(t.Size())
		}
	}
	for _, nd := range g.Nodes {
		if nd.OpType != "Constant" || nd.Domain != "" {
			continue
		}
		for _, a := range nd.Attrs {
			switch {
			case (a.Name == "value" || a.Name == "sparse_value") && a.T != nil && a.T.DType.IsFloat():
				n += int64(a.T.Size())
			case a.Name == "value_float":
				n++
			case a.Name == "value_floats":
				n += int64(len(a.Floats))
			}
		}
	}
	return n
}

// sameBits compares two rows bit for bit (so NaN rows compare equal to themselves).
func sameBits(a, b []float32) bool {
	for k := range a {
		if math.Float32bits(a[k]) != math.Float32bits(b[k]) {
			return false
		}
	}
	return true
}
