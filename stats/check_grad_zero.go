package stats

import (
	"github.com/vitals-health/vitals/report"
)

// gradZeroCheck: a weight whose gradient is exactly zero over the whole
// sample cannot change in training on data like it: nothing downstream lets
// a gradient through (every unit it feeds dead, or saturated to the last
// bit), or its output does not reach the loss.
var gradZeroCheck = &Check{
	Name: "gradient-zero",
	Doc: "Weights whose gradient (backward pass) is exactly zero over the whole sample: they would not change in training. " +
		"Nothing downstream lets a gradient through (all units dead or fully saturated) or the layer does not reach the loss. Common practice.",
	Run: func(p *Pass) {
		depth := map[string]int{}
		for _, l := range p.Report.Layers {
			if _, ok := depth[l.Node]; !ok {
				depth[l.Node] = l.Depth
			}
		}
		for _, w := range p.Report.Weights {
			if w.GradNorm == nil || *w.GradNorm != 0 {
				continue
			}
			// forward-pass findings downstream of the weight's node
			var below []int
			for i, l := range p.Report.Layers {
				if d, ok := depth[w.Node]; ok && l.Depth >= d {
					below = append(below, i)
				}
			}
			cs := causesAmong(p, below)
			p.Emit(report.Error, w.Node, 4, map[string]any{"weight": w.Name, "grad_norm": 0.0, "norm": w.Norm, "explained_by": causesJSON(cs)},
				"the gradient of %q is exactly zero over all %d samples: this layer would not learn.%s",
				w.Name, p.Report.Input.Samples, causeText(cs))
		}
	},
}
