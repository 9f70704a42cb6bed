package stats

import (
	"math"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

// Quantization health: for every float tensor read by a quantizing node
// (QuantizeLinear in the ONNX or com.microsoft domain, DynamicQuantizeLinear),
// over the whole sample,
//
//	clipped share  = #{v : round_half_even(v/scale) + zero_point ∉ [lo, hi]} / #values
//	levels used    = #{distinct saturated integers} / (hi − lo + 1)
//
// where [lo, hi] is the integer type's range; with one scale per axis index
// or block, the levels used are counted per scale and averaged. A dynamic
// quantizer takes its range from each batch, so it clips nothing; its levels
// are read from its integer output. The division v/scale is in float32, as
// the quantizer computes it.

// levelSetsMax bounds the integer-level bitmaps kept per quantizer (sets × levels).
const levelSetsMax = 1 << 24

type quantAcc struct {
	node    *loader.Node
	input   string // the float tensor quantized (for intOut: the integer output)
	dynamic bool
	intOut  bool // the integer output of a QLinear* node, judged from its values
	dt      tensor.DType
	lo, hi  float64
	scale   []float64
	zp      []float64
	pshape  []int // shape of the scale tensor
	axis    int
	block   int
	clipped int64
	count   int64
	used    [][]bool // per scale index (nil: not counted)
}

// quantSet holds the accumulators of a model's quantizers.
type quantSet struct {
	byInput map[string][]*quantAcc // float tensor → static quantizers reading it
	byOut   map[string]*quantAcc   // integer output of a dynamic quantizer → its accumulator
	byInt   map[string]*quantAcc   // integer output of a QLinear* node → its accumulator
	all     []*quantAcc
}

// qlinearOutParams gives, for operators with a quantized output, the input
// positions of its scale and zero point.
var qlinearOutParams = map[string][2]int{"QLinearConv": {6, 7}, "QLinearMatMul": {6, 7}, "QGemm": {7, 8},
	"QLinearAdd": {6, 7}, "QLinearMul": {6, 7}, "QLinearSigmoid": {3, 4}, "QLinearLeakyRelu": {3, 4},
	"QLinearGlobalAveragePool": {3, 4}, "QLinearConcat": {0, 1}}

func isQuantizer(n *loader.Node) bool {
	return n.OpType == "QuantizeLinear" && (n.Domain == "" || n.Domain == "ai.onnx" || n.Domain == "com.microsoft") ||
		n.OpType == "DynamicQuantizeLinear" && (n.Domain == "" || n.Domain == "ai.onnx")
}

// newQuantSet finds the quantizers of a plan whose parameters are known
// before the run (constant scale and zero point), and the dynamic ones.
func newQuantSet(g *loader.Graph, p *probe.Plan) *quantSet {
	qs := &quantSet{byInput: map[string][]*quantAcc{}, byOut: map[string]*quantAcc{}, byInt: map[string]*quantAcc{}}
	for _, s := range p.Steps {
		n := s.Node
		if pos, ok := qlinearOutParams[n.OpType]; ok && len(n.Inputs) > pos[1] && len(n.Outputs) > 0 && n.Outputs[0] != "" {
			sc, ok1 := constValue(g, n.Inputs[pos[0]])
			zp, ok2 := constValue(g, n.Inputs[pos[1]])
			if ok1 && ok2 && sc.Size() == 1 && zp.Size() == 1 {
				if lo, hi, ok := probe.QuantRange(zp.DType); ok && hi-lo < 1<<16 {
					a := &quantAcc{node: n, input: n.Outputs[0], intOut: true, dt: zp.DType, lo: lo, hi: hi,
						scale: []float64{float64(float32(sc.Float64At(0)))}, zp: []float64{zp.Float64At(0)}}
					a.used = [][]bool{make([]bool, int(hi-lo+1))}
					qs.byInt[a.input] = a
					qs.all = append(qs.all, a)
				}
			}
			continue
		}
		if !isQuantizer(n) || len(n.Inputs) == 0 || n.Inputs[0] == "" || len(n.Outputs) == 0 {
			continue
		}
		if n.OpType == "DynamicQuantizeLinear" {
			a := &quantAcc{node: n, input: n.Inputs[0], dynamic: true, dt: tensor.Uint8, lo: 0, hi: 255}
			a.used = [][]bool{make([]bool, 256)}
			qs.byOut[n.Outputs[0]] = a
			qs.all = append(qs.all, a)
			continue
		}
		if len(n.Inputs) < 2 {
			continue
		}
		sc, ok := constValue(g, n.Inputs[1])
		if !ok || sc.Size() == 0 {
			continue
		}
		a := &quantAcc{node: n, input: n.Inputs[0], dt: tensor.Uint8, pshape: sc.Shape, axis: 1}
		if at := n.Attrs["output_dtype"]; at != nil && at.I != 0 {
			a.dt = tensor.DType(at.I)
		}
		var zp *tensor.Tensor
		if len(n.Inputs) > 2 && n.Inputs[2] != "" {
			z, ok := constValue(g, n.Inputs[2])
			if !ok {
				continue
			}
			zp, a.dt = z, z.DType
		}
		if at := n.Attrs["axis"]; at != nil {
			a.axis = int(at.I)
		}
		if at := n.Attrs["block_size"]; at != nil {
			a.block = int(at.I)
		}
		lo, hi, ok := probe.QuantRange(a.dt)
		if !ok {
			continue
		}
		a.lo, a.hi = lo, hi
		for i := 0; i < sc.Size(); i++ {
			a.scale = append(a.scale, float64(float32(sc.Float64At(i))))
			z := 0.0
			if zp != nil && i < zp.Size() {
				z = zp.Float64At(i)
			}
			a.zp = append(a.zp, z)
		}
		if levels := int(hi - lo + 1); a.dt != tensor.Int32 && levels*len(a.scale) <= levelSetsMax {
			a.used = make([][]bool, len(a.scale))
		}
		qs.byInput[a.input] = append(qs.byInput[a.input], a)
		qs.all = append(qs.all, a)
	}
	if len(qs.all) == 0 {
		return nil
	}
	return qs
}

// observe takes one batch of a tensor: the float input of static quantizers,
// or the integer output of a dynamic quantizer or a QLinear* node. For the
// latter it returns the dequantized values, (q − zero_point)·scale in float32,
// for the layer's statistics; otherwise t.
func (qs *quantSet) observe(name string, t *tensor.Tensor) *tensor.Tensor {
	if qs == nil || t == nil {
		return t
	}
	if a := qs.byInt[name]; a != nil {
		if _, _, ok := probe.QuantRange(t.DType); ok && t.DType == a.dt {
			return a.observeInt(t)
		}
		return t
	}
	for _, a := range qs.byInput[name] {
		a.observeFloat(t)
	}
	if a := qs.byOut[name]; a != nil && t.DType == tensor.Uint8 {
		for _, q := range t.Data.([]uint8) {
			a.used[0][q] = true
		}
		a.count += int64(t.Size())
	}
	return t
}

// observeInt counts the levels an integer output takes and its values at the
// ends of the range (the bottom end only when it is not the zero point: a
// zero point at the bottom means a folded Relu, whose zeros sit there), and
// returns the dequantized values.
func (a *quantAcc) observeInt(t *tensor.Tensor) *tensor.Tensor {
	out := make([]float32, t.Size())
	s, z := float32(a.scale[0]), a.zp[0]
	for i := range out {
		q := t.Float64At(i)
		a.used[0][int(q-a.lo)] = true
		if q == a.hi || q == a.lo && z != a.lo {
			a.clipped++
		}
		out[i] = float32(q-z) * s
	}
	a.count += int64(len(out))
	return tensor.From(out, t.Shape...)
}

func (a *quantAcc) observeFloat(t *tensor.Tensor) {
	x, ok := t.Data.([]float32)
	if !ok {
		return
	}
	idx, err := probe.ParamIndex(t.Shape, a.pshape, a.axis, a.block)
	if err != nil {
		return // the kernel reports the mismatch when it runs
	}
	levels := int(a.hi - a.lo + 1)
	for i, v := range x {
		k := idx(i)
		r := math.RoundToEven(float64(v/float32(a.scale[k]))) + a.zp[k]
		if r < a.lo || r > a.hi {
			a.clipped++
		}
		if a.used != nil && !math.IsNaN(r) {
			if a.used[k] == nil {
				a.used[k] = make([]bool, levels)
			}
			a.used[k][int(math.Max(a.lo, math.Min(a.hi, r))-a.lo)] = true
		}
	}
	a.count += int64(len(x))
}

// result gives the clipped share, the share of levels used (NaN when not
// counted) and the report's description.
func (a *quantAcc) result() (clipped, levels float64, q *report.Quantization) {
	q = &report.Quantization{Node: a.node.Name, Op: a.node.OpType, Type: a.dt.String(), Granularity: "tensor",
		Scale: a.scale, ZeroPoint: a.zp, Clipped: a.clipped, Count: a.count, Measured: "float input"}
	if a.intOut {
		q.Measured = "integer output"
	}
	switch {
	case a.dynamic:
		q.Granularity = "dynamic"
	case a.block > 0:
		q.Granularity, q.Axis, q.BlockSize = "block", report.IntPtr(a.axis), a.block
	case len(a.scale) > 1:
		q.Granularity, q.Axis = "axis", report.IntPtr(a.axis)
	}
	clipped, levels = math.NaN(), math.NaN()
	if a.count > 0 && !a.dynamic {
		clipped = float64(a.clipped) / float64(a.count)
	}
	if a.dynamic && a.count > 0 {
		clipped = 0
	}
	if a.used != nil {
		q.Levels = int(a.hi - a.lo + 1)
		var sum float64
		sets := 0
		for _, u := range a.used {
			if u == nil {
				continue
			}
			n := 0
			for _, b := range u {
				if b {
					n++
				}
			}
			sum += float64(n) / float64(len(u))
			sets++
		}
		if sets > 0 {
			levels = sum / float64(sets)
		}
	}
	return clipped, levels, q
}

// quantFor returns the quantization results for a tensor: when several
// quantizers read it, the one that clips most.
func (qs *quantSet) quantFor(name string) (clipped, levels *float64, q *report.Quantization) {
	if qs == nil {
		return nil, nil, nil
	}
	var accs []*quantAcc
	accs = append(accs, qs.byInput[name]...)
	if a := qs.byInt[name]; a != nil {
		accs = append(accs, a)
	}
	for _, a := range qs.all {
		if a.dynamic && a.input == name {
			accs = append(accs, a)
		}
	}
	worst := -1.0
	for _, a := range accs {
		c, l, d := a.result()
		if d.Count == 0 {
			continue
		}
		if cv := report.Val(report.Num(c)); q == nil || cv > worst {
			worst, clipped, levels, q = cv, report.Num(c), report.Num(l), d
		}
	}
	return clipped, levels, q
}

// dequantConst evaluates a DequantizeLinear whose inputs are all constant (the
// quantized weights of a QDQ model), so that weight statistics and weight
// comparisons see the weights the model computes with.
func dequantConst(g *loader.Graph, n *loader.Node) (*tensor.Tensor, bool) {
	k, ok := probe.Lookup(n.Domain, n.OpType, 21)
	if !ok || len(n.Inputs) < 2 || len(n.Outputs) == 0 {
		return nil, false
	}
	in := make([]*tensor.Tensor, len(n.Inputs))
	for i, name := range n.Inputs {
		if name == "" {
			continue
		}
		t, ok := g.Initializers[name]
		if !ok {
			return nil, false
		}
		in[i] = t
	}
	c := &probe.Call{Node: n, In: in, Out: make([]*tensor.Tensor, len(n.Outputs)), Opset: 21}
	if err := k(c); err != nil || c.Out[0] == nil {
		return nil, false
	}
	return c.Out[0], true
}

// classifyQuantized gives the activation kind of a quantized operator whose
// output is observed dequantized: QLinearLeakyRelu and QLinearSigmoid as
// their float forms, and a QLinearConv, QLinearMatMul or QGemm whose output
// zero point is the bottom of its integer range as a ReLU (quantization
// tools fold a following Relu into the output range that way).
func classifyQuantized(n *loader.Node, g *loader.Graph) actInfo {
	switch n.OpType {
	case "QLinearLeakyRelu":
		return classify(&loader.Node{OpType: "LeakyRelu", Attrs: n.Attrs}, "LeakyRelu", g)
	case "QLinearSigmoid":
		return classify(&loader.Node{OpType: "Sigmoid"}, "Sigmoid", g)
	}
	pos, ok := qlinearOutParams[n.OpType]
	if !ok || len(n.Inputs) <= pos[1] {
		return actInfo{}
	}
	zp, ok := constValue(g, n.Inputs[pos[1]])
	if !ok || zp.Size() != 1 {
		return actInfo{}
	}
	if lo, _, ok := probe.QuantRange(zp.DType); ok && zp.Float64At(0) == lo {
		return actInfo{kind: ActReLU, note: "Relu folded into the quantized output (zero point at the bottom of the range)"}
	}
	return actInfo{}
}
