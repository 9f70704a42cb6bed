package stats

import (
	"github.com/vitals-health/vitals/report"
)

var nonfiniteCheck = &Check{
	Name: "nonfinite",
	Doc: "NaN or Inf in an activation or a weight. Any non-finite value propagates to the output; " +
		"the first layer where it appears is usually the cause (overflow in exp, division by zero, a diverged training run). Common practice.",
	Run: func(p *Pass) {
		first := true
		for _, l := range p.Report.Layers {
			if l.Nonfinite == 0 {
				continue
			}
			msg := "%d of %d values are NaN or Inf"
			strength := 1.0
			if first {
				msg += "; this is the first layer in depth order where they appear, so look here first"
				strength = 3
				first = false
			}
			p.Emit(report.Error, l.Node, strength, map[string]any{"nonfinite": l.Nonfinite, "count": l.Count}, msg, l.Nonfinite, l.Count)
		}
		for _, w := range p.Report.Weights {
			if w.Nonfinite > 0 {
				p.Emit(report.Error, w.Node, 5, map[string]any{"weight": w.Name, "nonfinite": w.Nonfinite},
					"weight %q holds %d NaN/Inf values: the checkpoint is corrupt or training diverged; retrain or restore an earlier checkpoint", w.Name, w.Nonfinite)
			}
		}
	},
}
