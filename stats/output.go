package stats

import (
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// outputAcc summarises the first graph output over the sample: whether it is
// a probability distribution over its last axis, the mean top probability,
// and with labels the accuracy and mean cross-entropy −ln p(label).
type outputAcc struct {
	name       string
	classes    int
	rows       int64
	distRows   int64 // rows that are distributions (non-negative, sum 1 ± 1e-3)
	sumMaxProb float64
	labeled    int64
	correct    int64
	sumCE      float64
}

// AddOutputs records one batch of model outputs; labels (may be nil) are the
// class ids of the batch's samples, in order.
func (c *Collector) AddOutputs(outs map[string]*tensor.Tensor, labels []int64) {
	g := c.Model.Graph
	if len(g.Outputs) == 0 {
		return
	}
	name := g.Outputs[0].Name
	t := outs[name]
	if t == nil || t.Rank() == 0 {
		return
	}
	x, ok := t.Data.([]float32)
	if !ok {
		return
	}
	if c.out == nil {
		c.out = &outputAcc{name: name}
	}
	o := c.out
	C := t.Shape[t.Rank()-1]
	if C < 2 || !c.classesLast(name, t.Rank()) {
		return
	}
	o.classes = C
	rows := len(x) / C
	probs := make([]float64, C)
	for r := 0; r < rows; r++ {
		row := x[r*C : (r+1)*C]
		sum, neg := 0.0, false
		for _, v := range row {
			sum += float64(v)
			if v < 0 {
				neg = true
			}
		}
		isDist := !neg && math.Abs(sum-1) < 1e-3
		if isDist {
			o.distRows++
			for i, v := range row {
				probs[i] = float64(v)
			}
		} else {
			softmax64(row, probs)
		}
		o.rows++
		best := 0
		for i := range probs {
			if probs[i] > probs[best] {
				best = i
			}
		}
		o.sumMaxProb += probs[best]
		// labels are per sample; with rows = samples (rank-2 outputs) they line up
		if labels != nil && r < len(labels) && rows == len(labels) {
			l := int(labels[r])
			if l >= 0 && l < C {
				o.labeled++
				if best == l {
					o.correct++
				}
				o.sumCE += -math.Log(math.Max(probs[l], 1e-12))
			}
		}
	}
}

func softmax64(row []float32, out []float64) {
	m := math.Inf(-1)
	for _, v := range row {
		m = math.Max(m, float64(v))
	}
	var s float64
	for i, v := range row {
		out[i] = math.Exp(float64(v) - m)
		s += out[i]
	}
	for i := range out {
		out[i] /= s
	}
}

// classesLast reports whether an output of this rank holds class scores on
// its last axis: [N, C] (probabilities or logits), or a higher rank made by
// a Softmax/LogSoftmax over the last axis ([N, T, C] per-step classes). A
// per-pixel map [N, 1, H, W] or another spatial or regression output is
// not a class distribution.
func (c *Collector) classesLast(name string, rank int) bool {
	if rank == 2 {
		return true
	}
	n := c.producer[name]
	for hops := 0; n != nil && sameValueOps[n.OpType] && n.OpType != "Transpose" && n.OpType != "Flatten" && len(n.Inputs) > 0 && hops < 8; hops++ {
		n = c.producer[n.Inputs[0]]
	}
	if n == nil || (n.OpType != "Softmax" && n.OpType != "LogSoftmax") {
		return false
	}
	in := c.byOut[n.Inputs[0]]
	if in == nil {
		in = c.inputs[n.Inputs[0]]
	}
	r := rank
	if in != nil && in.shape != nil {
		r = len(in.shape)
	}
	axis := int64(-1) // opset 13 on
	if c.Model.Opsets[""] < 13 {
		axis = 1
	}
	if a := n.Attrs["axis"]; a != nil {
		axis = a.I
	}
	return axis == -1 || axis == int64(r-1)
}
