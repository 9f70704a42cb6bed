package stats

import (
	"math"

	"vitals/loader"
	"vitals/report"
	"vitals/tensor"
)

// weightOf locates the weight initializer of a linear node and how its rows
// (output units) and fan-in are laid out.
//
//	Conv/ConvTranspose W: [M, C/g, k...]: rows = M filters, fan_in = C/g·∏k (ConvTranspose: [C, M/g, k...], fan_in = M/g·∏k... taken as dims[1]·∏k)
//	Gemm B: transB=1 → [N, K] rows = N, fan_in = K; transB=0 → [K, N] units are columns
//	MatMul B (initializer): [K, N], fan_in = K, units are columns
func weightOf(n *loader.Node, g *loader.Graph) (name string, w *tensor.Tensor, fanIn int, byColumns bool, ok bool) {
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
		return "", nil, 0, false, false
	}
	switch n.OpType {
	case "Conv", "ConvTranspose":
		fanIn = 1
		for _, d := range w.Shape[1:] {
			fanIn *= d
		}
	default:
		if w.Rank() != 2 {
			return "", nil, 0, false, false
		}
		if byColumns {
			fanIn = w.Shape[0]
		} else {
			fanIn = w.Shape[1]
		}
	}
	return name, w, fanIn, byColumns, true
}

// WeightStats computes, for every Conv/Gemm/MatMul weight, std, the gain
// g = std·√fan_in, g/√2 (He et al. 2015: Var[w] = 2/fan_in for ReLU) and g/1
// (Glorot & Bengio 2010: Var[w] ≈ 1/fan_in for tanh-like units), identical and
// all-zero rows (filters or output units), and NaN/Inf.
func WeightStats(g *loader.Graph, follow func(n *loader.Node) string) []report.Weight {
	var out []report.Weight
	seen := map[string]bool{}
	for _, n := range g.Nodes {
		name, w, fanIn, byCols, ok := weightOf(n, g)
		if !ok || seen[name] {
			continue
		}
		seen[name] = true
		x := w.F32()
		m := NewMoments()
		m.AddFloat32(x)
		rows, rowLen := w.Shape[0], len(x)/w.Shape[0]
		get := func(r, j int) float32 { return x[r*rowLen+j] }
		if byCols {
			rows, rowLen = w.Shape[1], w.Shape[0]
			get = func(r, j int) float32 { return x[j*w.Shape[1]+r] }
		}
		rowsData := make([][]float32, rows)
		for r := range rowsData {
			row := make([]float32, rowLen)
			for j := range row {
				row[j] = get(r, j)
			}
			rowsData[r] = row
		}
		ident, zero := identicalRows(rowsData)
		std := m.Std()
		gain := std * math.Sqrt(float64(fanIn))
		wr := report.Weight{
			Name: name, Node: n.Name, Shape: append([]int{}, w.Shape...), FanIn: fanIn,
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
// (every member of a group of equal rows counts), and all-zero rows.
func identicalRows(rows [][]float32) (identical, zero int) {
	groups := map[string]int{}
	keys := make([]string, len(rows))
	for i, r := range rows {
		allZero := true
		b := make([]byte, 0, 4*len(r))
		for _, v := range r {
			if v != 0 {
				allZero = false
			}
			u := math.Float32bits(v)
			b = append(b, byte(u), byte(u>>8), byte(u>>16), byte(u>>24))
		}
		if allZero {
			zero++
			continue
		}
		keys[i] = string(b)
		groups[keys[i]]++
	}
	for i := range rows {
		if keys[i] != "" && groups[keys[i]] > 1 {
			identical++
		}
	}
	return identical, zero
}

// ParameterCount sums the element counts of all float initializers.
func ParameterCount(g *loader.Graph) int64 {
	var n int64
	for _, t := range g.Initializers {
		if t.DType.IsFloat() {
			n += int64(t.Size())
		}
	}
	return n
}
