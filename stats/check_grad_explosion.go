package stats

import (
	"math"

	"github.com/vitals-health/vitals/report"
)

// gradExplosionCheck: the mirror of gradient-vanishing, the activation
// gradient RMS growing from the last layer of a plain stack to its first.
var gradExplosionCheck = &Check{
	Name: "gradient-explosion",
	Doc: "Activation gradients (RMS of dL/dy, backward pass) growing by orders of magnitude from the last layer of a plain stack to its first: training steps would be dominated by the early layers or diverge. " +
		"He et al. 2015 (§2.2, backward case): with Var[w] above 2/fan_out per ReLU layer the gradient variance grows geometrically with depth. Thresholds: ratios first/last (common practice).",
	Defaults: map[string]float64{"gradient-explosion.warning": 1e2, "gradient-explosion.error": 1e4, "gradient-explosion.min_layers": 3},
	Run: func(p *Pass) {
		for _, s := range gradStacks(p, int(p.T("min_layers"))) {
			lo, hi := *s.first.GradRMS, *s.last.GradRMS
			if hi == 0 {
				continue
			}
			ratio := lo / hi
			if ratio <= p.T("warning") {
				continue
			}
			sev := report.Warning
			if ratio > p.T("error") {
				sev = report.Error
			}
			cs := spreadCause(p, s.st, false)
			p.Emit(sev, s.first.Node, math.Log10(ratio/p.T("warning"))+1, map[string]any{
				"grad_rms_first": lo, "grad_rms_last": hi, "ratio": ratio, "layers": len(s.st.Layers),
				"last": s.last.Node, "explained_by": causesJSON(cs), "warning_at": p.T("warning"), "error_at": p.T("error")},
				"activation gradient RMS grows from %.3g at %q to %.3g here over %d layers (ratio %.3g): the gradient explodes with depth.%s Usual fixes: smaller initial weights (He/Xavier), normalisation layers, gradient clipping",
				hi, s.last.Node, lo, len(s.st.Layers), ratio, causeText(cs))
		}
	},
}
