package stats

import (
	"fmt"
	"math"
	"sort"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

// tfObserver feeds the transformer accumulators from the collector's hook
// and writes their results into the layer entries at Finish.
type tfObserver struct {
	s      *tfStructure
	attn   map[string]*attnAcc
	resid  map[string]*residAcc
	scores map[string]*scoreAcc
}

// OutlierShare is the share of positions at which a feature must reach
// |x| ≥ 6 to be an outlier dimension (Dettmers et al. 2022, LLM.int8(): at
// least 6% of the sequence dimensions).
const OutlierShare = 0.06

func newTFObserver(c *Collector) *tfObserver {
	s := findTransformer(c.flat.Graph, c.producer, c.consumer, c.dataDep)
	if len(s.softmax) == 0 && len(s.residual) == 0 && len(s.fused) == 0 && len(s.norm) == 0 {
		return nil
	}
	return &tfObserver{s: s, attn: map[string]*attnAcc{}, resid: map[string]*residAcc{}, scores: map[string]*scoreAcc{}}
}

// hook observes the transformer tensors among a node's outputs (on the
// executor's goroutine: they are read before the hook returns).
func (o *tfObserver) hook(n *loader.Node, outs []*tensor.Tensor) {
	for i, t := range outs {
		if t == nil || i >= len(n.Outputs) {
			continue
		}
		v := n.Outputs[i]
		switch {
		case o.s.softmax[v]:
			h := 1
			if t.Rank() == 4 {
				h = t.Shape[1]
			}
			a := o.attn[v]
			if a == nil {
				a = newAttnAcc(h)
				o.attn[v] = a
			}
			a.observe(t)
		case o.s.residual[v]:
			if t.Rank() < 2 {
				continue
			}
			r := o.resid[v]
			if r == nil {
				r = newResidAcc(t.Shape[t.Rank()-1])
				o.resid[v] = r
			}
			r.observe(t)
		}
		if _, ok := o.s.scores[v]; ok {
			sc := o.scores[v]
			if sc == nil {
				sc = &scoreAcc{}
				o.scores[v] = sc
			}
			sc.observe(t)
		}
	}
}

// finish fills the transformer fields of the report's layers.
func (o *tfObserver) finish(col *Collected) {
	r := col.Report
	type ref struct {
		i     int
		depth int
	}
	var attn, resid []ref
	for i := range r.Layers {
		l := &r.Layers[i]
		v := l.Output
		if k := o.s.norm[v]; k != "" {
			l.Role = "normalisation (" + k + ")"
		}
		if sc := o.scores[v]; sc != nil {
			l.Role = "attention-scores"
			if sc.negInf > 0 {
				l.MaskedValues = sc.negInf
				l.Nonfinite -= sc.negInf
				l.AttentionMask = fmt.Sprintf("%d −inf values reach the attention Softmax %s: a mask, not counted as non-finite", sc.negInf, o.s.scores[v])
			}
		}
		if o.attn[v] != nil {
			attn = append(attn, ref{i, l.Depth})
		}
		if o.resid[v] != nil {
			resid = append(resid, ref{i, l.Depth})
		}
	}
	byDepth := func(rs []ref) {
		sort.SliceStable(rs, func(a, b int) bool { return rs[a].depth < rs[b].depth })
	}
	byDepth(attn)
	byDepth(resid)
	for b, rf := range attn {
		l := &r.Layers[rf.i]
		a := o.attn[l.Output]
		l.Role = "attention-probabilities"
		l.Block = report.IntPtr(b)
		ent := a.entropy()
		for h := range ent {
			if math.IsNaN(ent[h]) {
				ent[h] = 0 // every row one-hot (K = 1): the limit of a collapsing head
			}
		}
		l.AttentionEntropy = ent
		l.AttentionMaxProb = a.maxProb()
		l.AttentionOneHotRows = append([]int64{}, a.oneHot...)
		l.AttentionMask = a.maskText()
	}
	for b, rf := range resid {
		l := &r.Layers[rf.i]
		a := o.resid[l.Output]
		l.Role = "residual-stream"
		l.ResidualIndex = report.IntPtr(b)
		blk := 0
		for k, at := range attn {
			if at.depth < rf.depth {
				blk = k
			}
		}
		l.Block = report.IntPtr(blk)
		med := a.median()
		if !math.IsNaN(med) {
			l.MedianAbs = report.Num(med)
			if med > 0 {
				l.MaxOverMedian = report.Num(a.maxAbs / med)
			}
		}
		d := a.outlierDims(OutlierShare)
		l.OutlierDims = &d
		if a.simN > 0 {
			l.TokenSimilarity = report.Num(a.simSum / float64(a.simN))
		}
	}
}

// maskText says how masked keys showed: probabilities exactly 0 in float32
// (a −inf or large negative term added before the Softmax).
func (a *attnAcc) maskText() string {
	switch {
	case a.maskedRows == 0:
		return "none: every key had non-zero probability in every row"
	case a.squareRows == a.totalRows && a.causalRows == a.totalRows:
		return "causal: in every row i exactly the keys j > i have probability 0"
	}
	return fmt.Sprintf("padding or other: %d of %d rows have keys with probability exactly 0; those keys are left out of K", a.maskedRows, a.totalRows)
}
