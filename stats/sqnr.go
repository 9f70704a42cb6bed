package stats

import (
	"math"
	"sort"
	"strings"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

// Float against quantized: for `vitals compare FLOAT QUANTIZED`, layers of the
// two graphs are matched and each matched pair gets the signal-to-
// quantization-noise ratio over the whole sample,
//
//	SQNR = 10·log10(Σ x² / Σ (x − x̂)²)  dB
//
// with x the OLD (float) tensor and x̂ the NEW one (dequantized with its
// constant scale and zero point when it is an integer tensor). Each 6.02 dB
// is one bit of resolution. Matching: first by tensor name (a QDQ graph keeps
// the float model's tensor names), then the remaining linear layers (Conv,
// Gemm, MatMul and their quantized forms) pair up in execution order; the
// output of a QuantizeLinear→DequantizeLinear pair is compared with the
// tensor it quantizes ("quantizer"), so a mis-scaled quantizer shows as the
// drop at its DequantizeLinear. A
// linear layer stands for its output after its bias Add (and, on the
// quantized side, after Cast and the rescaling Mul of ConvInteger and
// MatMulInteger); a quantized output whose zero point is the bottom of its
// range holds Relu(x), so it is compared with the Relu that follows on the
// float side.

// sqnrKeepMax bounds the bytes of OLD tensors kept for the comparison (1 GiB,
// at most a quarter of the memory budget); later batches are left out of the
// SQNR.
func sqnrKeepMax() int64 {
	m := int64(1 << 30)
	if b := tensor.MemoryBudget(); b > 0 {
		m = min(m, b/4)
	}
	return m
}

// SQNRPair is one OLD tensor matched to a NEW tensor.
type SQNRPair struct {
	Old, New         string // tensor names
	OldNode, NewNode string
	NewOp            string
	By               string // "name" or "order"
	// scale, zp dequantize an integer NEW tensor (per tensor).
	scale, zp      float64
	sumX2, sumErr  float64
	n              int64
	batches        int
	shapeMismatch  bool
	newBatchesSeen int
	depth          int // depth of the NEW tensor in NEW's plan
}

// SQNR matches two graphs' layers and accumulates the SQNR of each pair.
type SQNR struct {
	Pairs     []*SQNRPair
	byOld     map[string][]*SQNRPair
	byNew     map[string][]*SQNRPair
	kept      map[string][][]float32 // OLD tensor → its values per batch
	depthNew  map[string]int
	keptBytes int64
	keepMax   int64
	full      bool
	// quantizers of NEW (QuantizeLinear, DynamicQuantizeLinear) and their depth
	quantizers []quantizerAt
}

type quantizerAt struct {
	name  string
	depth int
}

var quantOps = map[string]bool{"QuantizeLinear": true, "DequantizeLinear": true, "DynamicQuantizeLinear": true, "QLinearConv": true,
	"QLinearMatMul": true, "ConvInteger": true, "MatMulInteger": true, "QGemm": true, "QLinearAdd": true, "QLinearMul": true,
	"QLinearSigmoid": true, "QLinearLeakyRelu": true, "QLinearGlobalAveragePool": true, "QLinearConcat": true}

// WantSQNR reports whether a comparison of these graphs is float against
// quantized or half precision: either holds a quantization operator or a
// Cast to float16.
func WantSQNR(oldG, newG *loader.Graph) bool {
	for _, g := range []*loader.Graph{oldG, newG} {
		for _, n := range g.Nodes {
			if quantOps[n.OpType] {
				return true
			}
			if n.OpType == "Cast" && n.Attrs["to"] != nil && tensor.DType(n.Attrs["to"].I) == tensor.Float16 {
				return true
			}
		}
	}
	return false
}

var (
	linearFloat = map[string]string{"Conv": "conv", "ConvTranspose": "conv", "Gemm": "dense", "MatMul": "dense"}
	linearQuant = map[string]string{"Conv": "conv", "QLinearConv": "conv", "ConvInteger": "conv", "ConvTranspose": "conv",
		"Gemm": "dense", "QGemm": "dense", "MatMul": "dense", "QLinearMatMul": "dense", "MatMulInteger": "dense"}
)

// graphInfo indexes one graph for matching.
type graphInfo struct {
	g        *loader.Graph
	steps    []*loader.Node
	producer map[string]*loader.Node
	consumer map[string][]*loader.Node
	outIdx   map[string]int // tensor → index of its producer in steps
}

func newGraphInfo(g *loader.Graph, p *probe.Plan) *graphInfo {
	gi := &graphInfo{g: g, producer: map[string]*loader.Node{}, consumer: map[string][]*loader.Node{}, outIdx: map[string]int{}}
	for i, s := range p.Steps {
		gi.steps = append(gi.steps, s.Node)
		for _, o := range s.Node.Outputs {
			if o != "" {
				gi.producer[o] = s.Node
				gi.outIdx[o] = i
			}
		}
		for _, in := range s.Node.Inputs {
			gi.consumer[in] = append(gi.consumer[in], s.Node)
		}
	}
	return gi
}

// scaleLike reports whether a tensor is a constant, or computed only from
// constants and the scale/zero-point outputs of DynamicQuantizeLinear (so a
// Mul by it rescales rather than mixes two data paths).
func (gi *graphInfo) scaleLike(name string, depth int) bool {
	if _, ok := constValue(gi.g, name); ok {
		return true
	}
	p := gi.producer[name]
	if p == nil || depth > 4 {
		return false
	}
	if p.OpType == "DynamicQuantizeLinear" {
		return len(p.Outputs) > 0 && p.Outputs[0] != name
	}
	if p.OpType != "Mul" && p.OpType != "Cast" && p.OpType != "Div" {
		return false
	}
	for _, in := range p.Inputs {
		if in != "" && !gi.scaleLike(in, depth+1) {
			return false
		}
	}
	return true
}

// tail follows a linear layer's output through its single-consumer bias Add,
// rescaling Mul, Cast and DequantizeLinear nodes; it returns the tensors on
// the way, the first being out.
func (gi *graphInfo) tail(out string) []string {
	path := []string{out}
	for step := 0; step < 8; step++ {
		cons := gi.consumer[out]
		if len(cons) != 1 || len(cons[0].Outputs) == 0 {
			break
		}
		c := cons[0]
		ok := false
		switch c.OpType {
		case "Cast", "DequantizeLinear":
			ok = len(c.Inputs) > 0 && c.Inputs[0] == out
		case "Add", "Mul":
			if len(c.Inputs) == 2 {
				other := c.Inputs[0]
				if other == out {
					other = c.Inputs[1]
				}
				ok = gi.scaleLike(other, 0)
			}
		}
		if !ok {
			break
		}
		out = c.Outputs[0]
		path = append(path, out)
	}
	return path
}

// qlinearOutParams returns the constant output scale and zero point of a
// quantized linear node and the low end of its type's range.
func (gi *graphInfo) qlinearOutParams(n *loader.Node) (scale, zp, lo float64, ok bool) {
	pos, known := qlinearOutParams[n.OpType]
	si, zi := pos[0], pos[1]
	if !known || len(n.Inputs) <= zi {
		return 0, 0, 0, false
	}
	s, ok1 := constValue(gi.g, n.Inputs[si])
	z, ok2 := constValue(gi.g, n.Inputs[zi])
	if !ok1 || !ok2 || s.Size() != 1 || z.Size() != 1 {
		return 0, 0, 0, false
	}
	lo, _, ok = probe.QuantRange(z.DType)
	return float64(float32(s.Float64At(0))), z.Float64At(0), lo, ok
}

// NewSQNR matches OLD's layers to NEW's (see the package comment above).
func NewSQNR(oldG, newG *loader.Graph, oldP, newP *probe.Plan) *SQNR {
	s := &SQNR{byOld: map[string][]*SQNRPair{}, byNew: map[string][]*SQNRPair{}, kept: map[string][][]float32{}, keepMax: sqnrKeepMax()}
	og, ng := newGraphInfo(oldG, oldP), newGraphInfo(newG, newP)
	s.depthNew = map[string]int{}
	for o, i := range ng.outIdx {
		if i < len(newP.Depth) {
			s.depthNew[o] = newP.Depth[i]
		}
	}
	for i, n := range ng.steps {
		if isQuantizer(n) && i < len(newP.Depth) {
			s.quantizers = append(s.quantizers, quantizerAt{n.Name, newP.Depth[i]})
		}
	}
	inputs := map[string]bool{}
	for _, in := range oldG.Inputs {
		inputs[in.Name] = true
	}
	matchedOld, matchedNew := map[string]bool{}, map[string]bool{}
	for _, n := range og.steps {
		for _, o := range n.Outputs {
			if o == "" || inputs[o] {
				continue
			}
			if np := ng.producer[o]; np != nil {
				p := &SQNRPair{Old: o, New: o, OldNode: n.Name, NewNode: np.Name, NewOp: np.OpType, By: "name"}
				if _, ok := qlinearOutParams[np.OpType]; ok { // an integer output under the float name
					p.scale, p.zp, _, _ = ng.qlinearOutParams(np)
				}
				s.add(p)
				matchedOld[o], matchedNew[o] = true, true
			}
		}
	}
	// a Q→DQ pair of NEW reproduces the tensor it quantizes: its dequantized
	// output is compared with that tensor in OLD (the noise of this quantizer
	// plus what came before it)
	for _, n := range ng.steps {
		if n.OpType != "DequantizeLinear" || len(n.Inputs) == 0 || len(n.Outputs) == 0 || n.Outputs[0] == "" {
			continue
		}
		q := ng.producer[n.Inputs[0]]
		if q == nil || q.OpType != "QuantizeLinear" || len(q.Inputs) == 0 {
			continue
		}
		src := q.Inputs[0]
		if op := og.producer[src]; op != nil {
			s.add(&SQNRPair{Old: src, New: n.Outputs[0], OldNode: op.Name, NewNode: n.Name, NewOp: n.OpType, By: "quantizer"})
			matchedNew[n.Outputs[0]] = true
		}
	}
	// linear layers left over, in execution order, paired within their kind
	type anchor struct {
		node *loader.Node
		path []string
	}
	anchors := func(gi *graphInfo, kinds map[string]string, matched map[string]bool) map[string][]anchor {
		out := map[string][]anchor{}
		for _, n := range gi.steps {
			kind, ok := kinds[n.OpType]
			if !ok || len(n.Outputs) == 0 || n.Outputs[0] == "" {
				continue
			}
			path := gi.tail(n.Outputs[0])
			taken := false
			for _, t := range path {
				taken = taken || matched[t]
			}
			if !taken {
				out[kind] = append(out[kind], anchor{n, path})
			}
		}
		return out
	}
	oa, na := anchors(og, linearFloat, matchedOld), anchors(ng, linearQuant, matchedNew)
	for _, kind := range []string{"conv", "dense"} {
		if len(oa[kind]) != len(na[kind]) {
			continue // no safe pairing by order
		}
		for i, o := range oa[kind] {
			nw := na[kind][i]
			p := &SQNRPair{Old: o.path[len(o.path)-1], New: nw.path[len(nw.path)-1], OldNode: o.node.Name, NewNode: nw.node.Name,
				NewOp: nw.node.OpType, By: "order"}
			if strings.HasPrefix(nw.node.OpType, "QLinear") || nw.node.OpType == "QGemm" {
				if len(nw.path) == 1 { // an integer output: dequantize it here
					sc, zp, lo, ok := ng.qlinearOutParams(nw.node)
					if !ok {
						continue
					}
					p.scale, p.zp = sc, zp
					// zero point at the bottom of the range: the output holds Relu(x)
					if cons := og.consumer[p.Old]; zp == lo && len(cons) == 1 && cons[0].OpType == "Relu" && len(cons[0].Outputs) > 0 {
						p.Old, p.OldNode = cons[0].Outputs[0], cons[0].Name
					}
				}
			}
			if p.NewNode == "" {
				p.NewNode = nw.node.Name
			}
			s.add(p)
		}
	}
	return s
}

// SetKeepLimit sets the bytes of OLD tensors kept for the comparison.
func (s *SQNR) SetKeepLimit(bytes int64) { s.keepMax = bytes }

func (s *SQNR) add(p *SQNRPair) {
	p.depth = s.depthNew[p.New]
	s.Pairs = append(s.Pairs, p)
	s.byOld[p.Old] = append(s.byOld[p.Old], p)
	s.byNew[p.New] = append(s.byNew[p.New], p)
}

// TapOld keeps a copy of every matched OLD float output of one batch (call
// it with each node's outputs as they are computed, batch after batch).
func (s *SQNR) TapOld(n *loader.Node, outs []*tensor.Tensor) {
	for i, t := range outs {
		if t == nil || i >= len(n.Outputs) || len(s.byOld[n.Outputs[i]]) == 0 {
			continue
		}
		x, ok := t.Data.([]float32)
		if !ok {
			continue
		}
		name := n.Outputs[i]
		if s.full || s.keptBytes+int64(len(x))*4 > s.keepMax {
			s.full = true
			continue
		}
		s.kept[name] = append(s.kept[name], append([]float32(nil), x...))
		s.keptBytes += int64(len(x)) * 4
	}
}

// TapNew adds one batch of NEW outputs against the OLD batch kept in the same
// position (the two runs must see the same batches in the same order).
func (s *SQNR) TapNew(n *loader.Node, outs []*tensor.Tensor) {
	for i, t := range outs {
		if t == nil || i >= len(n.Outputs) {
			continue
		}
		for _, p := range s.byNew[n.Outputs[i]] {
			k := p.newBatchesSeen
			p.newBatchesSeen++
			kept := s.kept[p.Old]
			if k >= len(kept) || kept[k] == nil {
				continue
			}
			x := kept[k]
			if len(x) != t.Size() {
				p.shapeMismatch = true
				continue
			}
			var sx, se float64
			if f, ok := t.Data.([]float32); ok && p.scale == 0 {
				for j, v := range x {
					d := float64(v) - float64(f[j])
					sx += float64(v) * float64(v)
					se += d * d
				}
			} else if p.scale != 0 {
				for j, v := range x {
					xq := float64(float32(t.Float64At(j)-p.zp) * float32(p.scale))
					d := float64(v) - xq
					sx += float64(v) * float64(v)
					se += d * d
				}
			} else {
				continue
			}
			p.sumX2 += sx
			p.sumErr += se
			p.n += int64(len(x))
			p.batches++
		}
	}
	// a kept OLD batch is done once every pair reading it has passed it
	for i := range outs {
		if i >= len(n.Outputs) {
			continue
		}
		for _, p := range s.byNew[n.Outputs[i]] {
			k := p.newBatchesSeen - 1
			done := true
			for _, q := range s.byOld[p.Old] {
				done = done && q.newBatchesSeen > k
			}
			if kept := s.kept[p.Old]; done && k >= 0 && k < len(kept) && kept[k] != nil {
				s.keptBytes -= int64(len(kept[k])) * 4
				kept[k] = nil
			}
		}
	}
}

// DB is the pair's SQNR in dB (+Inf when the tensors are identical, NaN
// when nothing was compared).
func (p *SQNRPair) DB() float64 {
	if p.n == 0 || p.shapeMismatch {
		return math.NaN()
	}
	if p.sumErr == 0 {
		return math.Inf(1)
	}
	return 10 * math.Log10(p.sumX2/p.sumErr)
}

// dbPerBit is the SQNR of one bit of resolution: a uniform quantizer's
// SQNR grows by 20·log10(2) ≈ 6.02 dB per bit (the standard
// quantization-noise relation).
const dbPerBit = 6.02

// applyLayers writes sqnr_db onto the matched layers of NEW's comparison
// (adding an entry for a pair whose NEW tensor is an integer tensor without
// a layer of its own) and takes the layers it pairs off the unmatched list.
// Compare calls it before the compare checks run, so that quant-noise
// (check_quant_noise.go) reads the SQNR from the Pass.
func (s *SQNR) applyLayers(r *report.Report) {
	if r.Compare == nil {
		return
	}
	matchedOld, matchedNew := map[string]bool{}, map[string]bool{}
	for _, p := range s.Pairs {
		db := p.DB()
		if math.IsNaN(db) {
			continue
		}
		matchedOld[p.OldNode] = true
		found := false
		for i := range r.Compare.Layers {
			if d := &r.Compare.Layers[i]; d.Node == p.NewNode {
				d.SQNRdB, d.SQNRMatch, found = sqnrNum(db), p.By, true
				if d.OldNode != p.OldNode {
					d.OldNode = p.OldNode
				}
			}
		}
		matchedNew[p.NewNode] = true
		if !found {
			d := report.LayerDelta{Node: p.NewNode, OldNode: p.OldNode, Op: p.NewOp, SQNRdB: sqnrNum(db), SQNRMatch: p.By}
			if o, n := layerOf(r.Compare.OldLayers, p.OldNode), layerOf(r.Layers, p.NewNode); o != nil && n != nil {
				d.MeanOld, d.MeanNew, d.StdOld, d.StdNew = o.Mean, n.Mean, o.Std, n.Std
				d.DeadOld, d.DeadNew, d.SaturatedOld, d.SaturatedNew = o.DeadFraction, n.DeadFraction, o.SaturatedFraction, n.SaturatedFraction
				d.HistogramDistance = report.Num(HistogramDistance(o.Histogram, n.Histogram))
			}
			r.Compare.Layers = append(r.Compare.Layers, d)
		}
	}
	// NEW's depth order, entries added here among the others
	layerDepth := map[string]int{}
	for _, l := range r.Layers {
		layerDepth[l.Node] = l.Depth
	}
	for _, p := range s.Pairs {
		if _, ok := layerDepth[p.NewNode]; !ok {
			layerDepth[p.NewNode] = p.depth
		}
	}
	sort.SliceStable(r.Compare.Layers, func(i, j int) bool {
		return layerDepth[r.Compare.Layers[i].Node] < layerDepth[r.Compare.Layers[j].Node]
	})
	// layers paired here are no longer unmatched
	keep := r.Compare.Unmatched[:0]
	for _, u := range r.Compare.Unmatched {
		side, rest, _ := strings.Cut(u, " ")
		node, _, _ := strings.Cut(rest, " (")
		if side == "OLD" && matchedOld[node] || side == "NEW" && matchedNew[node] {
			continue
		}
		keep = append(keep, u)
	}
	r.Compare.Unmatched = keep
}

// SQNRResult is one matched pair's SQNR over the sample, for the checks.
type SQNRResult struct {
	*SQNRPair
	DB    float64 // SQNR in dB (+Inf: identical tensors)
	Depth int     // depth of the NEW tensor in NEW's plan
	// Batches is the number of batches compared, of Seen batches of NEW
	// (fewer when the OLD tensors kept for it reached the keep limit).
	Batches, Seen int
}

// Results are the pairs with an SQNR, in NEW's depth order.
func (s *SQNR) Results() []SQNRResult {
	var rs []SQNRResult
	for _, p := range s.Pairs {
		if db := p.DB(); !math.IsNaN(db) {
			rs = append(rs, SQNRResult{SQNRPair: p, DB: db, Depth: p.depth, Batches: p.batches, Seen: p.newBatchesSeen})
		}
	}
	sort.SliceStable(rs, func(i, j int) bool { return rs[i].Depth < rs[j].Depth })
	return rs
}

// QuantizersBetween names NEW's quantizers (QuantizeLinear,
// DynamicQuantizeLinear) deeper than lo and shallower than hi.
func (s *SQNR) QuantizersBetween(lo, hi int) []string {
	var out []string
	for _, q := range s.quantizers {
		if q.depth > lo && q.depth < hi {
			out = append(out, q.name)
		}
	}
	return out
}

// KeepLimit is the bytes of OLD tensors kept for the comparison.
func (s *SQNR) KeepLimit() int64 { return s.keepMax }

// sqnrNum is the JSON value of an SQNR: nil for NaN and for +Inf (identical tensors).
func sqnrNum(db float64) *float64 { return report.Num(db) }

func layerOf(ls []report.Layer, node string) *report.Layer {
	for i := range ls {
		if ls[i].Node == node {
			return &ls[i]
		}
	}
	return nil
}
