package stats

import (
	"fmt"
	"math"
	"sort"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

// tfObserver feeds the transformer accumulators and writes their results
// into the layer entries at Finish. The map of entries is built before the
// run and only read after; an entry is touched only by the observation jobs
// of its own layer (like the layer's own accumulator), on the statistics
// worker or inline (Collector.process).
type tfObserver struct {
	s       *tfStructure
	entries map[string]*tfEntry
	// fused holds the fused attention nodes by name; their probabilities
	// come after the node's outputs in the hook and are observed there.
	fused map[string]*tfEntry
	// batch is the leading dimension of the current batch's inputs (set by
	// AddInputs, read by the hook on the same goroutine).
	batch int
}

type tfEntry struct {
	softmax, residual, score bool
	// heads of a probability tensor: axis 1 of a rank-4 tensor; for a rank-3
	// (B·H, Sq, K) tensor its first dimension over the batch size. Set by
	// the hook at the first batch, before the tensor is queued.
	heads int
	node  string // a fused node whose entry got the statistics (finish)
	attn  *attnAcc
	resid *residAcc
	sc    scoreAcc
}

// OutlierShare is the share of positions at which a feature must reach
// |x| ≥ 6 to be an outlier dimension (Dettmers et al. 2022, LLM.int8(): at
// least 6% of the sequence dimensions).
const OutlierShare = 0.06

func newTFObserver(c *Collector) *tfObserver {
	s := findTransformer(c.flat.Graph, int(c.Model.Opsets[""]), c.producer, c.consumer, c.dataDep)
	if len(s.softmax) == 0 && len(s.residual) == 0 && len(s.fused) == 0 && len(s.norm) == 0 {
		return nil
	}
	o := &tfObserver{s: s, entries: map[string]*tfEntry{}, fused: map[string]*tfEntry{}}
	for _, n := range s.fused {
		o.fused[n.Name] = &tfEntry{softmax: true}
	}
	get := func(v string) *tfEntry {
		e := o.entries[v]
		if e == nil {
			e = &tfEntry{}
			o.entries[v] = e
		}
		return e
	}
	for v := range s.softmax {
		get(v).softmax = true
	}
	for v := range s.residual {
		get(v).residual = true
	}
	for v := range s.scores {
		get(v).score = true
	}
	return o
}

// inputs records the batch size of the batch about to run.
func (o *tfObserver) inputs(batch map[string]*tensor.Tensor) {
	for _, t := range batch {
		if t != nil && t.Rank() > 0 {
			o.batch = t.Shape[0]
			return
		}
	}
}

// hook fixes the head count of a probability tensor at its first batch (on
// the executor's goroutine, before the tensor is queued).
func (o *tfObserver) hook(n *loader.Node, outs []*tensor.Tensor) {
	if e := o.fused[n.Name]; e != nil && len(outs) > len(n.Outputs) {
		if t := outs[len(n.Outputs)]; t != nil && t.Rank() == 4 {
			if e.attn == nil {
				e.heads = t.Shape[1]
				e.attn = newAttnAcc(e.heads)
			}
			e.attn.observe(t) // the kernel's own tensor: read here, on the executor's goroutine
		}
		return
	}
	for i, t := range outs {
		if t == nil || i >= len(n.Outputs) {
			continue
		}
		e := o.entries[n.Outputs[i]]
		if e == nil || !e.softmax || e.heads != 0 {
			continue
		}
		if ax, ok := o.s.axis[n.Outputs[i]]; ok && ax != t.Rank()-1 {
			e.heads = -1 // a Softmax across another axis: not attention probabilities
			continue
		}
		switch {
		case t.Rank() == 4:
			e.heads = t.Shape[1]
		case t.Rank() == 3 && o.batch > 0 && t.Shape[0]%o.batch == 0:
			e.heads = t.Shape[0] / o.batch
		default:
			e.heads = 1
		}
	}
}

// observe takes one batch of value v (Collector.process).
func (o *tfObserver) observe(v string, t *tensor.Tensor) {
	e := o.entries[v]
	if e == nil {
		return
	}
	if e.softmax && e.heads > 0 {
		if e.attn == nil {
			e.attn = newAttnAcc(e.heads)
		}
		e.attn.observe(t)
	}
	if e.residual && t.Rank() >= 2 {
		if e.resid == nil {
			e.resid = newResidAcc(t.Shape[t.Rank()-1])
		}
		e.resid.observe(t)
	}
	if e.score {
		e.sc.observe(t)
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
			l.Structure = "normalisation (" + k + ")"
		}
		if fe := o.fused[l.Node]; fe != nil && fe.attn != nil && fe.node == "" {
			fe.node = l.Node // the fused node's first output entry
			attn = append(attn, ref{i, l.Depth})
			continue
		}
		e := o.entries[v]
		if e == nil {
			continue
		}
		if sc := &e.sc; e.score {
			l.Structure = "attention-scores"
			if sc.negInf > 0 {
				l.MaskedValues = sc.negInf
				l.Nonfinite -= sc.negInf
				l.AttentionMask = fmt.Sprintf("%d −inf values reach the attention Softmax %s: a mask, not counted as non-finite", sc.negInf, o.s.scores[v])
			}
		}
		if e.attn != nil {
			attn = append(attn, ref{i, l.Depth})
		}
		if e.resid != nil {
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
		var a *attnAcc
		if e := o.entries[l.Output]; e != nil && e.attn != nil {
			a = e.attn
			l.Structure = "attention-probabilities"
		} else {
			a = o.fused[l.Node].attn
			l.Structure = "attention (fused)"
		}
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
		a := o.entries[l.Output].resid
		l.Structure = "residual-stream"
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
