package stats

import (
	"math"

	"github.com/vitals-health/vitals/report"
)

var spreadExplosionCheck = &Check{
	Name: "spread-explosion",
	Doc: "Activation spread (std) growing along a plain stack of layers (no normalisation, global pooling, residual Add, Concat or gating Mul between them), last layer against first. " +
		"Glorot & Bengio 2010; He et al. 2015: weights larger than the activation's reference scale make the signal grow geometrically with depth.",
	Defaults: map[string]float64{"spread-explosion.warning": 10, "spread-explosion.error": 1e3, "spread-explosion.min_layers": 3},
	Run: func(p *Pass) {
		above := func(r float64) bool { return r > p.T("warning") }
		for _, f := range spreadOutliers(p, above, func(a, b float64) bool { return a > b }) {
			sev := report.Warning
			if f.ratio > p.T("error") {
				sev = report.Error
			}
			p.Emit(sev, f.last.Node, math.Log10(f.ratio/p.T("warning"))+1, map[string]any{"std_first": f.first.Std, "std_last": f.last.Std,
				"ratio": f.ratio, "layers": len(f.st.Layers), "first": f.first.Node, "compound_gain": compoundGain(p, f.st), "also": f.others, "weights": stackWeightNames(p, f.st), "plain": !f.st.Merged},
				"activation std grows from %.3g at %q to %.3g here over %d layers (ratio %.3g): the signal explodes with depth.%s Usual fixes: smaller initial weights (Xavier/He), normalisation layers, gradient clipping",
				report.Val(f.first.Std), f.first.Node, report.Val(f.last.Std), len(f.st.Layers), f.ratio, alsoText(f))
		}
	},
}
