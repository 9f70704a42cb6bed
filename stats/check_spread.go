package stats

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/report"
)

func stackSpread(p *Pass, st Stack) (first, last *report.Layer, ratio float64) {
	first, last = &p.Report.Layers[st.Layers[0]], &p.Report.Layers[st.Layers[len(st.Layers)-1]]
	return first, last, report.Val(last.Std) / report.Val(first.Std)
}

// spreadFinding is one stack whose spread ratio crossed a line.
type spreadFinding struct {
	st          Stack
	first, last *report.Layer
	ratio       float64
	others      []string // the last layers of other stacks from the same first layer that crossed it too
}

// spreadOutliers are the plain stacks of at least min_layers layers whose ratio
// last/first crosses the line (beyond(ratio) true), one per first layer:
// the stacks of a network with branches (residual blocks end one stack per
// branch) share their first layer, and one finding on the worst of them,
// naming how many others crossed the line too, says what they all say.
func spreadOutliers(p *Pass, beyond func(float64) bool, worse func(a, b float64) bool) []spreadFinding {
	byFirst := map[string]int{}
	var out []spreadFinding
	for _, st := range p.Stacks {
		// plain chains only: a residual Add, a Concat or a gating Mul adds
		// another path's variance, outside Glorot & Bengio 2010's and He et
		// al. 2015's analysis, and a trained network's scale may change there
		if st.Merged || len(st.Layers) < int(p.T("min_layers")) {
			continue
		}
		first, last, ratio := stackSpread(p, st)
		if math.IsNaN(ratio) || !beyond(ratio) {
			continue
		}
		i, seen := byFirst[first.Node]
		if !seen {
			byFirst[first.Node] = len(out)
			out = append(out, spreadFinding{st: st, first: first, last: last, ratio: ratio, others: []string{}})
			continue
		}
		f := &out[i]
		if worse(ratio, f.ratio) {
			f.others = append(f.others, f.last.Node)
			f.st, f.last, f.ratio = st, last, ratio
		} else {
			f.others = append(f.others, last.Node)
		}
	}
	return out
}

// alsoText is the sentence on the other stacks of a spread finding.
func alsoText(f spreadFinding) string {
	if len(f.others) == 0 {
		return ""
	}
	return fmt.Sprintf(" %d other layers downstream of %q cross the line too.", len(f.others), f.first.Node)
}

// stackWeightNames are the names of the weights along a stack, in order
// (where weight-scale looks for a cause of a spread finding).
func stackWeightNames(p *Pass, st Stack) []string {
	out := []string{}
	for _, wi := range st.Weights {
		out = append(out, p.Report.Weights[wi].Name)
	}
	return out
}
