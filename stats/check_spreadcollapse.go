package stats

import (
	"math"

	"github.com/vitals-health/vitals/report"
)

var spreadCollapseCheck = &Check{
	Name: "spread-collapse",
	Doc: "Activation spread (std) shrinking along a plain stack of layers (no normalisation, global pooling, residual Add, Concat or gating Mul between them), last layer against first. " +
		"Glorot & Bengio 2010 show the signal vanishing with depth when weights are too small for the activation; He et al. 2015 derive the scale that keeps it (Var[w]=2/fan_in for ReLU).",
	Defaults: map[string]float64{"spread-collapse.warning": 0.1, "spread-collapse.error": 1e-3, "spread-collapse.min_layers": 3},
	Run: func(p *Pass) {
		below := func(r float64) bool { return r < p.T("warning") }
		for _, f := range spreadOutliers(p, below, func(a, b float64) bool { return a < b }) {
			sev := report.Warning
			if f.ratio < p.T("error") {
				sev = report.Error
			}
			p.Emit(sev, f.last.Node, math.Log10(p.T("warning")/math.Max(f.ratio, 1e-30)), map[string]any{"std_first": f.first.Std, "std_last": f.last.Std,
				"ratio": f.ratio, "layers": len(f.st.Layers), "first": f.first.Node, "compound_gain": compoundGain(p, f.st), "also": f.others, "weights": stackWeightNames(p, f.st), "plain": !f.st.Merged},
				"activation std falls from %.3g at %q to %.3g here over %d layers (ratio %.2g): the signal vanishes with depth.%s Usual fixes: Xavier/He initialisation for the activation used, normalisation layers",
				report.Val(f.first.Std), f.first.Node, report.Val(f.last.Std), len(f.st.Layers), f.ratio, alsoText(f))
		}
	},
}
