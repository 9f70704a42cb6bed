package stats

import (
	"math"

	"github.com/vitals-health/vitals/report"
)

// gradVanishingCheck: with a backward pass, the RMS of dL/d(activation) at
// the first layer of a plain stack against its last layer. The chain rule
// multiplies the gradient by every layer's Jacobian on its way down; when
// each factor is small (saturated sigmoid/tanh, dead ReLUs, weights below
// the activation's reference scale) the product falls geometrically with
// depth (Glorot & Bengio 2010 §4; He et al. 2015 §2.2, backward case).
var gradVanishingCheck = &Check{
	Name: "gradient-vanishing",
	Doc: "Activation gradients (RMS of dL/dy, backward pass) falling by orders of magnitude from the last layer of a plain stack to its first: the early layers would barely learn. " +
		"Glorot & Bengio 2010 and He et al. 2015 (§2.2, backward case) show the gradient shrinking geometrically with depth when each layer's Jacobian is small; saturated or dead units are the usual cause. Thresholds: ratios first/last (orders of magnitude: common practice).",
	Defaults: map[string]float64{"gradient-vanishing.warning": 1e-2, "gradient-vanishing.error": 1e-4, "gradient-vanishing.min_layers": 3},
	Run: func(p *Pass) {
		for _, s := range gradStacks(p, int(p.T("min_layers"))) {
			lo, hi := *s.first.GradRMS, *s.last.GradRMS
			if lo == 0 || hi == 0 {
				continue // gradient-zero's case
			}
			ratio := lo / hi
			if ratio >= p.T("warning") {
				continue
			}
			sev := report.Warning
			if ratio < p.T("error") {
				sev = report.Error
			}
			cs := append(causesAmong(p, s.st.Layers), spreadCause(p, s.st, true)...)
			p.Emit(sev, s.first.Node, math.Log10(p.T("warning")/ratio)+1, map[string]any{
				"grad_rms_first": lo, "grad_rms_last": hi, "ratio": ratio, "layers": len(s.st.Layers),
				"last": s.last.Node, "explained_by": causesJSON(cs), "warning_at": p.T("warning"), "error_at": p.T("error")},
				"activation gradient RMS falls from %.3g at %q to %.3g here over %d layers (ratio %.2g): the gradient vanishes with depth and the early layers would barely learn.%s Usual fixes: non-saturating activations, He/Xavier initialisation, normalisation layers, residual connections",
				hi, s.last.Node, lo, len(s.st.Layers), ratio, causeText(cs))
		}
	},
}
