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
		h, nz := rowHashes(x, rows, rowLen, byCols)
		ident, zero := identicalRows(rowLen, row, h, nz)
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
// (every member of a group of equal rows counts), and all-zero rows. Rows
// are grouped by h, their 64-bit FNV-1a hashes of their bit patterns
// (rowHashes; nz: the row holds a value that is not 0); rows sharing a hash
// are read through row (which may fill buf) and compared value by value, so
// the weights are never copied whole.
func identicalRows(rowLen int, row func(r int, buf []float32) []float32, h []uint64, nz []bool) (identical, zero int) {
	buf := make([]float32, rowLen)
	byHash := map[uint64][]int{}
	for r := range h {
		if !nz[r] {
			zero++
			continue
		}
		byHash[h[r]] = append(byHash[h[r]], r)
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

const (
	fnvOffset = 14695981039346656037
	fnvPrime  = 1099511628211
)

// rowHashes returns each row's 64-bit FNV-1a hash of its values' bit
// patterns in order, h = (h ⊕ bits(v))·p from the offset basis, and
// whether it holds a value that is not 0 (−0 is 0, NaN is not). x is
// rows × rowLen row-major, or with byCols rowLen × rows with the rows of
// interest its columns (a MatMul weight's output units). The columns are
// hashed side by side in one pass down the matrix, and plain rows four at a
// time, so that no hash waits on the multiply before it and no column is
// gathered across the whole matrix (GPT-2-small's weights: about 0.3 s of
// CPU before).
func rowHashes(x []float32, rows, rowLen int, byCols bool) ([]uint64, []bool) {
	h := make([]uint64, rows)
	nz := make([]bool, rows)
	for i := range h {
		h[i] = fnvOffset
	}
	if byCols {
		for j := 0; j < rowLen; j++ {
			line := x[j*rows : (j+1)*rows]
			hs, zs := h[:len(line)], nz[:len(line)]
			for c, f := range line {
				hs[c] = (hs[c] ^ uint64(math.Float32bits(f))) * fnvPrime
				zs[c] = zs[c] || f != 0
			}
		}
		return h, nz
	}
	r := 0
	for ; r+4 <= rows; r += 4 {
		a := x[r*rowLen : (r+1)*rowLen]
		b := x[(r+1)*rowLen : (r+2)*rowLen]
		c := x[(r+2)*rowLen : (r+3)*rowLen]
		d := x[(r+3)*rowLen : (r+4)*rowLen]
		ha, hb, hc, hd := uint64(fnvOffset), uint64(fnvOffset), uint64(fnvOffset), uint64(fnvOffset)
		za, zb, zc, zd := false, false, false, false
		for j := range a {
			fa, fb, fc, fd := a[j], b[j], c[j], d[j]
			ha = (ha ^ uint64(math.Float32bits(fa))) * fnvPrime
			hb = (hb ^ uint64(math.Float32bits(fb))) * fnvPrime
			hc = (hc ^ uint64(math.Float32bits(fc))) * fnvPrime
			hd = (hd ^ uint64(math.Float32bits(fd))) * fnvPrime
			za, zb, zc, zd = za || fa != 0, zb || fb != 0, zc || fc != 0, zd || fd != 0
		}
		h[r], h[r+1], h[r+2], h[r+3] = ha, hb, hc, hd
		nz[r], nz[r+1], nz[r+2], nz[r+3] = za, zb, zc, zd
	}
	for ; r < rows; r++ {
		hv, z := uint64(fnvOffset), false
		for _, f := range x[r*rowLen : (r+1)*rowLen] {
			hv = (hv ^ uint64(math.Float32bits(f))) * fnvPrime
			z = z || f != 0
		}
		h[r], nz[r] = hv, z
	}
	return h, nz
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
