package stats

import (
	"math"

	"github.com/vitals-health/vitals/report"
)

// updateRatioCheck: with a learning rate, the plain-SGD step of each weight
// relative to the weight, lr·‖dL/dW‖/‖W‖. A ratio around 1e-3 per step is
// the usual rule of thumb (common practice); far below, the layer barely
// moves; far above, one step rewrites it.
var updateRatioCheck = &Check{
	Name: "update-ratio",
	Doc: "Predicted plain-SGD update size per weight, lr·‖dL/dW‖/‖W‖ (backward pass with --lr), far from the rule of thumb of about 1e-3 per step (common practice). " +
		"Far below, the layer would barely move at this learning rate; far above, one step would rewrite it.",
	Defaults: map[string]float64{"update-ratio.low": 1e-5, "update-ratio.high": 1e-1},
	Run: func(p *Pass) {
		for _, w := range p.Report.Weights {
			if w.UpdateRatio == nil || *w.UpdateRatio == 0 {
				continue
			}
			u := *w.UpdateRatio
			ev := map[string]any{"weight": w.Name, "update_ratio": u, "grad_norm": w.GradNorm, "norm": w.Norm,
				"lr": p.Report.Gradients.LR, "low_at": p.T("low"), "high_at": p.T("high"), "rule_of_thumb": 1e-3}
			switch {
			case u < p.T("low"):
				p.Emit(report.Warning, w.Node, math.Log10(p.T("low")/u)+1, ev,
					"one SGD step would change %q by %.2g of its norm, far below the usual ~1e-3: at this learning rate the layer would barely learn", w.Name, u)
			case u > p.T("high"):
				p.Emit(report.Warning, w.Node, math.Log10(u/p.T("high"))+1, ev,
					"one SGD step would change %q by %.2g of its norm, far above the usual ~1e-3: at this learning rate the step would overwrite the layer", w.Name, u)
			}
		}
	},
}
