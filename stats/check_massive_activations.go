package stats

import (
	"fmt"

	"github.com/vitals-health/vitals/report"
)

// massiveActivationsCheck: a few residual-stream values thousands of times the median.
var massiveActivationsCheck = &Check{
	Name: "massive-activations",
	Doc: "Residual-stream values far larger than the stream's median magnitude. " +
		"Sun et al. 2024 (Massive Activations in Large Language Models) call an activation massive when |x| > 100 and about 1000 times the median |x| of its hidden state; " +
		"they appear at one block and are carried unchanged by the residual stream after it, act as fixed biases, and break per-tensor quantization and low-precision inference. " +
		"The first residual tensor where they appear is a warning, the later ones that carry them information.",
	Defaults: map[string]float64{"massive-activations.min_abs": 100, "massive-activations.ratio": 1000},
	Run: func(p *Pass) {
		r := p.Report
		first := ""
		for _, i := range tfLayers(r, "residual-stream") {
			l := r.Layers[i]
			if l.MaxOverMedian == nil || l.Min == nil || l.Max == nil {
				continue
			}
			mx := max(-*l.Min, *l.Max)
			ratio := *l.MaxOverMedian
			if mx <= p.T("min_abs") || ratio < p.T("ratio") {
				continue
			}
			ev := map[string]any{"block": *l.Block, "residual_index": *l.ResidualIndex, "max_abs": mx, "median_abs": l.MedianAbs, "max_over_median": ratio,
				"min_abs": p.T("min_abs"), "ratio": p.T("ratio")}
			if first == "" {
				first = l.Node
				p.Emit(report.Warning, l.Node, ratio/p.T("ratio")*4, ev,
					"block %d, residual tensor %d: max |x| = %.4g is %.0f× the median |x| (%.3g): massive activations (Sun et al. 2024) first appear here. "+
						"They dominate the stream from here on; per-tensor int8/fp8 quantization of this tensor will crush every other value",
					*l.Block, *l.ResidualIndex, mx, ratio, *l.MedianAbs)
				continue
			}
			p.Emit(report.Info, l.Node, 1, ev, "%s", fmt.Sprintf("block %d, residual tensor %d: max |x| = %.4g, %.0f× the median, carried from %s", *l.Block, *l.ResidualIndex, mx, ratio, first))
		}
	},
}
