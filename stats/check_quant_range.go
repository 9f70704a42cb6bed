package stats

import (
	"fmt"

	"github.com/vitals-health/vitals/report"
)

// quantRangeCheck judges every quantized tensor (the float input of a
// QuantizeLinear or DynamicQuantizeLinear) by its clipped share and the share
// of integer levels its quantized values take (stats/quant.go).
var quantRangeCheck = &Check{
	Name: "quant-range",
	Doc: "A quantized tensor whose values clip at the ends of the integer range, or that uses few of its integer levels. " +
		"For the integer output of a QLinear* node the values at the ends of the range are counted (an upper bound of the clipped ones). " +
		"Clipped values lose their magnitude (a scale too small for the values, usually calibration on unrepresentative data); " +
		"few levels used means coarse steps for the values that matter (a scale too large, often widened by a few outliers). " +
		"Thresholds are common practice: more than 1% clipped or fewer than 10% of the levels used deserve a look, more than 5% clipped is an error.",
	Defaults: map[string]float64{"quant-range.clipped_warning": 0.01, "quant-range.clipped_error": 0.05, "quant-range.levels_warning": 0.1},
	Run: func(p *Pass) {
		judge := func(node, tensor string, clipped, levels *float64, q *report.Quantization) {
			if q == nil {
				return
			}
			ev := map[string]any{"tensor": tensor, "quantizer": q.Node, "type": q.Type, "granularity": q.Granularity,
				"clipped": q.Clipped, "count": q.Count}
			if len(q.Scale) == 1 {
				ev["scale"], ev["zero_point"] = q.Scale[0], q.ZeroPoint[0]
			}
			if clipped != nil {
				ev["clipped_fraction"] = *clipped
			}
			if levels != nil {
				ev["levels_used_fraction"] = *levels
			}
			params := fmt.Sprintf("%s, %s", q.Type, q.Granularity)
			if len(q.Scale) == 1 {
				params = fmt.Sprintf("%s, scale %.4g, zero point %g", q.Type, q.Scale[0], q.ZeroPoint[0])
			}
			if clipped != nil {
				if sev, ok := sevFor(*clipped, p.T("clipped_warning"), p.T("clipped_error")); ok {
					ev["warning_at"], ev["error_at"] = p.T("clipped_warning"), p.T("clipped_error")
					if q.Measured == "integer output" {
						p.Emit(sev, node, *clipped/p.T("clipped_warning"), ev,
							"%s of the values of %q (%d of %d) sit at the ends of the integer range of %q (%s): "+
								"values beyond the range saturate there when the result is requantized; the output scale is too small for these values",
							pct(*clipped), tensor, q.Clipped, q.Count, q.Node, params)
						return
					}
					p.Emit(sev, node, *clipped/p.T("clipped_warning"), ev,
						"%s of the values of %q (%d of %d) fall outside the range of its quantizer %q (%s) and are clipped: "+
							"the scale is too small for these values; recalibrate on data like this sample, or use a wider scale",
						pct(*clipped), tensor, q.Clipped, q.Count, q.Node, params)
					return
				}
			}
			if levels != nil && *levels < p.T("levels_warning") && q.Levels > 0 {
				ev["levels_warning_at"] = p.T("levels_warning")
				p.Emit(report.Warning, node, p.T("levels_warning")/max(*levels, 1e-9), ev,
					"the quantized values of %q take only %s of the %d integer levels of its quantizer %q (%s): "+
						"the steps are coarse for these values; a range widened by outliers is the usual cause (calibrate with percentiles, or clip the outliers)",
					tensor, pct(*levels), q.Levels, q.Node, params)
			}
		}
		for _, l := range p.Report.Layers {
			judge(l.Node, l.Output, l.ClippedFraction, l.LevelsUsedFraction, l.Quantization)
		}
		for _, in := range p.Report.Input.PerInput {
			if in.Quantization != nil {
				judge(in.Quantization.Node, in.Name, in.ClippedFraction, in.LevelsUsedFraction, in.Quantization)
			}
		}
	},
}
