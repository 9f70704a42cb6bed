package check

import (
	"context"
	"math"

	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/stats"
	"github.com/vitals-health/vitals/tensor"
)

// Compare runs OLD and NEW on the same batches in the same order and diffs
// their statistics into NEW's report (one report model, not a second
// pipeline): per-layer shifts, findings that appeared or went away, and the
// agreement of their first outputs (top-1 agreement, mean KL(old‖new) when
// both are probability distributions, max |Δ|). Both models are checked
// with the same sample and options; o.Outputs sees NEW's batches.
func Compare(ctx context.Context, old, new *Model, sample Sample, o Options) (*report.Report, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	if err := sample.validate(); err != nil {
		return nil, err
	}
	budget := &tensor.Arena{Budget: o.MemoryBudget}
	// float against quantized or float16: SQNR per matched layer
	var sqnr *stats.SQNR
	oldO, newO := o, o
	if stats.WantSQNR(old.graph(), new.graph()) {
		sqnr = stats.NewSQNR(old.graph(), new.graph(), old.plan, new.plan)
		if b := o.MemoryBudget; b > 0 {
			sqnr.SetKeepLimit(min(int64(1<<30), b/4))
		}
		oldO.tap, newO.tap = sqnr.TapOld, sqnr.TapNew
	}
	// OLD first: its outputs per batch are kept only as long as needed for agreement
	oldFeed, err := openFeed(old.graph(), sample, budget)
	if err != nil {
		return nil, err
	}
	defer oldFeed.Close()
	var oldOuts []*tensor.Tensor
	oldName := firstOutput(old)
	oldO.Gradients, newO.Gradients = nil, nil // a backward pass is for Check only
	oldCol, err := analyse(ctx, old, oldFeed, oldO, func(outs map[string]*tensor.Tensor, k int) error {
		oldOuts = append(oldOuts, outs[oldName])
		return nil
	})
	if err != nil {
		return nil, err
	}
	newFeed, err := openFeed(new.graph(), sample, budget)
	if err != nil {
		return nil, err
	}
	defer newFeed.Close()
	// NEW's batches must be OLD's for the outputs to agree batch by batch
	newFeed.replay, newFeed.auto = oldFeed.sizes, false
	ag := &agreeAcc{}
	newName := firstOutput(new)
	batchIdx := 0
	newCol, err := analyse(ctx, new, newFeed, newO, func(outs map[string]*tensor.Tensor, k int) error {
		if batchIdx < len(oldOuts) {
			ag.add(oldOuts[batchIdx], outs[newName])
			oldOuts[batchIdx] = nil
		}
		batchIdx++
		if o.Outputs != nil {
			return o.Outputs(outs, k)
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	note(o, oldFeed, newFeed)
	newCol.SQNR = sqnr // its sqnr_db and the quant-noise check run inside Compare
	stats.Compare(oldCol, newCol, oldCol.Graph, newCol.Graph, ag.result(newName))
	annotateInputs(newCol.Report, newFeed)
	return newCol.Report, nil
}

func firstOutput(m *Model) string {
	if len(m.graph().Outputs) == 0 {
		return ""
	}
	return m.graph().Outputs[0].Name
}

// agreeAcc compares the two checkpoints' outputs row by row: top-1 agreement,
// mean KL(old‖new) when both rows are probability distributions, and max |Δ|.
type agreeAcc struct {
	rows, same, distRows int
	kl, maxAbs           float64
	comparable           bool
}

func (a *agreeAcc) add(o, n *tensor.Tensor) {
	if o == nil || n == nil || !tensor.SameShape(o.Shape, n.Shape) || o.DType != tensor.Float32 || n.DType != tensor.Float32 || o.Rank() == 0 {
		return
	}
	a.comparable = true
	x, y := o.F32(), n.F32()
	for i := range x {
		a.maxAbs = math.Max(a.maxAbs, math.Abs(float64(x[i])-float64(y[i])))
	}
	C := o.Shape[o.Rank()-1]
	if C < 2 {
		return
	}
	for r := 0; r+C <= len(x); r += C {
		xr, yr := x[r:r+C], y[r:r+C]
		a.rows++
		if argmax(xr) == argmax(yr) {
			a.same++
		}
		if isDist(xr) && isDist(yr) {
			a.distRows++
			for i := range xr {
				p, q := float64(xr[i]), math.Max(float64(yr[i]), 1e-12)
				if p > 0 {
					a.kl += p * math.Log(p/q)
				}
			}
		}
	}
}

func argmax(x []float32) int {
	b := 0
	for i, v := range x {
		if v > x[b] {
			b = i
		}
	}
	return b
}

func isDist(x []float32) bool {
	s := 0.0
	for _, v := range x {
		if v < 0 {
			return false
		}
		s += float64(v)
	}
	return math.Abs(s-1) < 1e-3
}

func (a *agreeAcc) result(name string) *report.Agreement {
	if !a.comparable {
		return nil
	}
	ag := &report.Agreement{Output: name, MaxAbsDiff: report.Num(a.maxAbs), Samples: a.rows}
	if a.rows > 0 {
		ag.Top1 = report.Num(float64(a.same) / float64(a.rows))
	}
	if a.distRows == a.rows && a.rows > 0 {
		ag.MeanKL = report.Num(a.kl / float64(a.distRows))
	}
	return ag
}
