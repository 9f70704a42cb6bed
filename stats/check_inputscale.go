package stats

import (
	"math"

	"github.com/vitals-health/vitals/report"
)

var inputScaleCheck = &Check{
	Name: "input-scale",
	Doc: "Per-channel mean and std of each float model input. " +
		"Zero-centred, unit-scale input is common practice; raw pixel values or unscaled sensor units saturate or kill the first layers.",
	Defaults: map[string]float64{"input-scale.max_abs_mean": 1, "input-scale.std_low": 0.2, "input-scale.std_high": 5},
	Run: func(p *Pass) {
		if p.Report.Input.Source == "synthetic" {
			return
		}
		for _, in := range p.Report.Input.PerInput {
			if in.Mean == nil {
				continue
			}
			means, stds := in.ChannelMean, in.ChannelStd
			if len(means) == 0 {
				means, stds = []float64{*in.Mean}, []float64{report.Val(in.Std)}
			}
			bad, constant := 0, 0
			worstMean, worstStd := 0.0, 1.0
			for i := range means {
				m, s := means[i], stds[i]
				if s == 0 {
					constant++ // a constant feature: no rescaling changes it
					continue
				}
				if math.Abs(m) > p.T("max_abs_mean") || s < p.T("std_low") || s > p.T("std_high") {
					bad++
					if math.Abs(m) > math.Abs(worstMean) {
						worstMean = m
					}
					if math.Abs(math.Log(s)) > math.Abs(math.Log(worstStd)) {
						worstStd = s
					}
				}
			}
			if constant > 0 {
				p.Emit(report.Info, in.Name, 1, map[string]any{"constant_channels": constant, "channels": len(means)},
					"input %q: %d of %d channel(s) constant over the sample (std 0): they carry no information here", in.Name, constant, len(means))
			}
			if bad == 0 {
				continue
			}
			p.Emit(report.Warning, in.Name, 1+float64(bad)/float64(len(means)), map[string]any{"channels_off_scale": bad, "channels": len(means),
				"mean": in.Mean, "std": in.Std, "worst_channel_mean": worstMean, "worst_channel_std": worstStd},
				"input %q: %d of %d channel(s) not zero-centred, unit-scale (among them: largest |mean| %.3g, std furthest from 1: %.3g). Check that the sample was preprocessed exactly as in training (scaling, mean/std normalisation)",
				in.Name, bad, len(means), worstMean, worstStd)
		}
	},
}
