package stats

import (
	"fmt"

	"github.com/vitals-health/vitals/report"
)

// float16RangeCheck judges the activations a model holds in float16 by the
// values vitals observed computing them in float32 (stats/half.go).
var float16RangeCheck = &Check{
	Name: "float16-range",
	Doc: "Float16 activations with values beyond the float16 range or, in large shares, below its smallest normal value. " +
		"A value beyond ±65504 becomes Inf when the model runs in float16 (an error: the Inf propagates); " +
		"non-zero values below 2⁻¹⁴ ≈ 6.1e-5 keep fewer significant bits and the smallest flush to zero. " +
		"The subnormal share threshold (10%) is common practice. A note lists how many tensors the model holds in float16.",
	Defaults: map[string]float64{"float16-range.subnormal_warning": 0.1},
	Run: func(p *Pass) {
		acts, first := 0, ""
		for _, l := range p.Report.Layers {
			if !l.Float16 {
				continue
			}
			acts++
			if first == "" {
				first = l.Node
			}
			ev := map[string]any{"tensor": l.Output, "count": l.Count, "float16_max": Float16Max, "float16_min_normal": Float16MinNormal}
			if l.Float16OverflowFraction != nil && *l.Float16OverflowFraction > 0 {
				f := *l.Float16OverflowFraction
				ev["float16_overflow_fraction"] = f
				ev["max"], ev["min"] = l.Max, l.Min
				p.Emit(report.Error, l.Node, 2+f*100, ev,
					"%s of the values of %q (largest magnitude %s) exceed 65504, the largest float16: they become Inf when the model runs in float16; "+
						"keep this layer in float32, or rescale it (normalisation, a smaller weight scale)",
					pctSmall(f), l.Output, fmtMag(l))
				continue
			}
			if l.Float16SubnormalFraction != nil && *l.Float16SubnormalFraction >= p.T("subnormal_warning") {
				f := *l.Float16SubnormalFraction
				ev["float16_subnormal_fraction"], ev["warning_at"] = f, p.T("subnormal_warning")
				p.Emit(report.Warning, l.Node, f/p.T("subnormal_warning"), ev,
					"%s of the values of %q are non-zero but below 6.1e-5, the smallest normal float16: in float16 they keep fewer significant bits and the smallest become 0; "+
						"keep this layer in float32 or scale it up", pct(f), l.Output)
			}
		}
		if w := len(p.Report.Model.Float16Weights); acts > 0 || w > 0 {
			node := first
			if node == "" && len(p.Report.Layers) > 0 {
				node = p.Report.Layers[0].Node
			}
			p.Emit(report.Info, node, 1, map[string]any{"float16_activations": acts, "float16_weights": w},
				"the model holds %d activations and %d weights in float16; vitals computed them in float32 and flags values a float16 run would lose", acts, w)
		}
	},
}

// pctSmall shows a share as a percentage with enough digits for small shares.
func pctSmall(x float64) string {
	if x >= 0.001 {
		return pct(x)
	}
	return fmt.Sprintf("%.2g%%", 100*x)
}

func fmtMag(l report.Layer) string {
	m := 0.0
	if l.Max != nil {
		m = max(m, *l.Max)
	}
	if l.Min != nil {
		m = max(m, -*l.Min)
	}
	return fmt.Sprintf("%.4g", m)
}
