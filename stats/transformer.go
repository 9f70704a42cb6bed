package stats

import (
	"github.com/vitals-health/vitals/loader"
)

// Transformer structure, found in the graph before the run
// (docs/transformers.md):
//
//   - attention blocks: a Softmax along the last axis whose output is the
//     first input of a MatMul (through Cast/Identity/Dropout) and whose input
//     comes from a MatMul through elementwise nodes (the scale, the mask Add,
//     a softcap); fused attention operators (Attention, MultiHeadAttention,
//     GroupQueryAttention) are blocks too: their kernels hand the
//     probabilities to the hook after the node's outputs (probe Call.Observe),
//     and the statistics go on the entry of the node's first output;
//   - heads: axis 1 of a rank-4 probability tensor (B, H, Sq, K); a rank-3
//     tensor counts as one head per slice;
//   - attention scores: the tensors on the way from the MatMul into the
//     Softmax and the masks added there; their −inf values are the mask;
//   - the residual stream: Add nodes with two data inputs where one input is
//     an ancestor of the other through a MatMul or Gemm (x + f(x)), and the
//     summed output of SkipLayerNormalization-type nodes;
//   - normalisation layers: LayerNormalization, RMSNormalization and the
//     com.microsoft forms, and decomposed ones: a Div (or Mul by Reciprocal)
//     by Sqrt(ReduceMean(·) + ε), LayerNorm when the numerator subtracts a
//     ReduceMean, RMS otherwise.
type tfStructure struct {
	softmax  map[string]bool   // attention-probability values (Softmax outputs)
	axis     map[string]int    // a softmax value's non-negative axis attribute
	scores   map[string]string // value → the attention Softmax it feeds
	residual map[string]bool
	norm     map[string]string // value → normalisation kind
	fused    []*loader.Node
}

var attnPassOps = map[string]bool{"Cast": true, "Identity": true, "Dropout": true}
var scoreOps = map[string]bool{"Add": true, "Sub": true, "Mul": true, "Div": true, "Where": true, "Cast": true,
	"Identity": true, "Tanh": true, "Clip": true, "Unsqueeze": true, "Reshape": true, "Expand": true, "Slice": true,
	"Squeeze": true, "Neg": true, "Min": true, "Max": true}
var fusedAttnOps = map[string]bool{"Attention": true, "MultiHeadAttention": true, "GroupQueryAttention": true}
var layerNormOps = map[string]string{"LayerNormalization": "LayerNormalization", "RMSNormalization": "RMSNormalization",
	"SimplifiedLayerNormalization": "RMS (SimplifiedLayerNormalization)", "SkipLayerNormalization": "LayerNormalization (SkipLayerNormalization)",
	"SkipSimplifiedLayerNormalization": "RMS (SkipSimplifiedLayerNormalization)", "EmbedLayerNormalization": "LayerNormalization (EmbedLayerNormalization)"}

// findTransformer reads the structure of g; opset is the default domain's
// (before 13 a Softmax without an axis attribute works along axis 1).
func findTransformer(g *loader.Graph, opset int, producer map[string]*loader.Node, consumer map[string][]*loader.Node, dataDep map[string]bool) *tfStructure {
	s := &tfStructure{softmax: map[string]bool{}, axis: map[string]int{}, scores: map[string]string{}, residual: map[string]bool{}, norm: map[string]string{}}
	lv := &valueLevels{producer: producer, memo: map[string]int{}}
	for _, n := range g.Nodes {
		switch {
		case n.OpType == "Softmax" && len(n.Inputs) == 1 && len(n.Outputs) == 1:
			ax := n.Attrs["axis"]
			if (ax == nil && opset < 13) || (ax != nil && ax.I != -1 && ax.I < 2) {
				continue // not along the key axis of a (…, Sq, K) tensor
			}
			if feedsMatMul(n.Outputs[0], consumer, 0) && fromMatMul(n.Inputs[0], producer, 0) {
				s.softmax[n.Outputs[0]] = true
				if ax != nil && ax.I >= 0 {
					s.axis[n.Outputs[0]] = int(ax.I) // checked against the rank when observed
				}
				s.markScores(n.Inputs[0], n.Name, producer, dataDep, 0)
			}
		case fusedAttnOps[n.OpType]:
			s.fused = append(s.fused, n)
		case layerNormOps[n.OpType] != "":
			if len(n.Outputs) > 0 {
				s.norm[n.Outputs[0]] = layerNormOps[n.OpType]
			}
			if (n.OpType == "SkipLayerNormalization" || n.OpType == "SkipSimplifiedLayerNormalization") && len(n.Outputs) > 3 && n.Outputs[3] != "" {
				s.residual[n.Outputs[3]] = true
			}
		case n.OpType == "Add" && len(n.Inputs) == 2 && dataDep[n.Inputs[0]] && dataDep[n.Inputs[1]]:
			if reachesThroughLinear(n.Inputs[1], n.Inputs[0], producer, lv) || reachesThroughLinear(n.Inputs[0], n.Inputs[1], producer, lv) {
				s.residual[n.Outputs[0]] = true
			}
		case n.OpType == "Div" && len(n.Inputs) == 2:
			if k := decomposedNorm(n, producer); k != "" {
				s.norm[n.Outputs[0]] = k
			}
		}
	}
	for v := range s.scores { // a scale or mask Add is not a residual connection
		delete(s.residual, v)
	}
	return s
}

// feedsMatMul: v is the first input of a MatMul, directly or through pass-through ops.
func feedsMatMul(v string, consumer map[string][]*loader.Node, hop int) bool {
	if hop > 4 {
		return false
	}
	for _, c := range consumer[v] {
		if c.OpType == "MatMul" && len(c.Inputs) > 0 && c.Inputs[0] == v {
			return true
		}
		if attnPassOps[c.OpType] && len(c.Outputs) > 0 && feedsMatMul(c.Outputs[0], consumer, hop+1) {
			return true
		}
	}
	return false
}

// fromMatMul: v comes from a MatMul through score ops (first data input followed).
func fromMatMul(v string, producer map[string]*loader.Node, hop int) bool {
	p := producer[v]
	if p == nil || hop > 8 {
		return false
	}
	if p.OpType == "MatMul" {
		return true
	}
	if !scoreOps[p.OpType] {
		return false
	}
	for _, in := range p.Inputs {
		if in != "" && fromMatMul(in, producer, hop+1) {
			return true
		}
	}
	return false
}

// markScores records the data values upstream of an attention Softmax's
// input through score ops (the scores and the masks added to them).
func (s *tfStructure) markScores(v, sm string, producer map[string]*loader.Node, dataDep map[string]bool, hop int) {
	p := producer[v]
	if p == nil || hop > 12 || !dataDep[v] || p.OpType == "MatMul" || !scoreOps[p.OpType] {
		return
	}
	if _, ok := s.scores[v]; ok {
		return
	}
	s.scores[v] = sm
	for _, in := range p.Inputs {
		if in != "" {
			s.markScores(in, sm, producer, dataDep, hop+1)
		}
	}
}

// reachesThroughLinear reports whether from is an ancestor of to on a path
// that passes a MatMul, Gemm or fused attention node. The search walks up
// from to and leaves out the values whose level is not above from's (they
// cannot descend from it), so that it visits the block between the two
// rather than the whole graph above (Swin-T: the collector is made in
// 45 instead of 228 ms).
func reachesThroughLinear(from, to string, producer map[string]*loader.Node, lv *valueLevels) bool {
	type st struct {
		v   string
		lin bool
	}
	floor := lv.of(from)
	seen := map[st]bool{}
	stack := []st{{to, false}}
	for len(stack) > 0 && len(seen) < 20000 {
		cur := stack[len(stack)-1]
		stack = stack[:len(stack)-1]
		if cur.v == from {
			if cur.lin {
				return true
			}
			continue
		}
		if seen[cur] || lv.of(cur.v) <= floor {
			continue
		}
		seen[cur] = true
		p := producer[cur.v]
		if p == nil {
			continue
		}
		lin := cur.lin || p.OpType == "MatMul" || p.OpType == "Gemm" || fusedAttnOps[p.OpType]
		for _, in := range p.Inputs {
			if in != "" {
				stack = append(stack, st{in, lin})
			}
		}
	}
	return false
}

// valueLevels gives each value its level: 0 for a value no node produces
// (graph inputs, initializers), else 1 + the largest level among its
// producer's inputs, so that every ancestor of a value has a smaller level.
type valueLevels struct {
	producer map[string]*loader.Node
	memo     map[string]int // −1 while a value's level is being computed
}

func (l *valueLevels) of(v string) int {
	if d, ok := l.memo[v]; ok {
		return max(d, 0) // a cycle (an invalid graph) counts as level 0
	}
	p := l.producer[v]
	if p == nil {
		l.memo[v] = 0
		return 0
	}
	l.memo[v] = -1
	d := 0
	for _, in := range p.Inputs {
		if in != "" {
			d = max(d, l.of(in)+1)
		}
	}
	l.memo[v] = d
	return d
}

// decomposedNorm recognises x' / Sqrt(ReduceMean(q) + ε): "decomposed
// LayerNorm" when x' is Sub(x, ReduceMean(x)), else "decomposed RMS".
func decomposedNorm(n *loader.Node, producer map[string]*loader.Node) string {
	sq := producer[n.Inputs[1]]
	if sq == nil || sq.OpType != "Sqrt" {
		return ""
	}
	add := producer[sq.Inputs[0]]
	if add == nil || add.OpType != "Add" {
		return ""
	}
	hasMean := false
	for _, in := range add.Inputs {
		if p := producer[in]; p != nil && p.OpType == "ReduceMean" {
			hasMean = true
		}
	}
	if !hasMean {
		return ""
	}
	if num := producer[n.Inputs[0]]; num != nil && num.OpType == "Sub" && len(num.Inputs) == 2 {
		if p := producer[num.Inputs[1]]; p != nil && p.OpType == "ReduceMean" {
			return "decomposed LayerNorm"
		}
	}
	return "decomposed RMS"
}
