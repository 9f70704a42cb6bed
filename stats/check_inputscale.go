package stats

import (
	"math"

	"github.com/vitals-health/vitals/report"
)

var inputScaleCheck = &Check{
	Name: "input-scale",
	Doc: "Scale of each float model input as a whole: a warning only for values no common preprocessing produces, or when the first BatchNorm after the input confirms a mismatch; otherwise information. " +
		"No common preprocessing produces |mean| over raw_abs_mean or std over raw_std (raw 0–255 pixels, integer audio samples). " +
		"Standardisation gives std 1, [0,1] or [−1,1] scaling keeps |x| ≤ 1, and ImageNet normalisation keeps x within [−2.12, 2.64] (its published per-channel mean and std); the raw lines sit far outside all of them (common practice). " +
		"An input off zero-centred unit scale is also a warning when the first BatchNorm after it drifts (batchnorm-drift): its running statistics are the training data's, the strongest evidence of a preprocessing mismatch. " +
		"An input off zero-centred unit scale but within those lines (raw audio in [−1, 1] at speech amplitude, a page of mostly white paper after ImageNet normalisation, standardised tables with near-constant columns) is information, as are constant columns. " +
		"Skipped when the graph normalises its own input (Sub/Div by constants, or a normalisation layer first), where batchnorm-drift compares the input with the stored statistics, and for the initial state of a recurrent layer fed as an input.",
	Defaults: map[string]float64{"input-scale.max_abs_mean": 1, "input-scale.std_low": 0.2, "input-scale.std_high": 5,
		"input-scale.raw_abs_mean": 10, "input-scale.raw_std": 10},
	Run: func(p *Pass) {
		if p.Report.Input.Source == "synthetic" {
			return
		}
		for _, in := range p.Report.Input.PerInput {
			if in.Mean == nil || in.SelfNormalised || in.RecurrentState {
				continue
			}
			constant := 0
			for _, s := range in.ChannelStd {
				if s == 0 {
					constant++ // a constant feature: no rescaling changes it
				}
			}
			if constant > 0 {
				p.Emit(report.Info, in.Name, 1, map[string]any{"constant_channels": constant, "channels": len(in.ChannelStd)},
					"input %q: %d of %d channel(s) constant over the sample (std 0): they carry no information here", in.Name, constant, len(in.ChannelStd))
			}
			m, s := *in.Mean, report.Val(in.Std)
			if s == 0 {
				continue // constant as a whole: said above per channel, or nothing to scale
			}
			ev := map[string]any{"mean": m, "std": s, "min": in.Min, "max": in.Max}
			if math.Abs(m) > p.T("raw_abs_mean") || s > p.T("raw_std") {
				hint := ""
				if lo, hi := report.Val(in.Min), report.Val(in.Max); lo >= 0 && hi > 1 && hi <= 255 {
					hint = " The range [0, 255] suggests raw 8-bit pixel values."
				}
				p.Emit(report.Warning, in.Name, math.Max(math.Abs(m)/p.T("raw_abs_mean"), s/p.T("raw_std")), ev,
					"input %q has mean %.3g and std %.3g over the sample, values that no common preprocessing (standardisation, [0,1] or [−1,1] scaling, ImageNet normalisation) produces.%s Check that the sample was preprocessed exactly as in training",
					in.Name, m, s, hint)
				continue
			}
			if math.Abs(m) > p.T("max_abs_mean") || s < p.T("std_low") || s > p.T("std_high") {
				if bn := confirmingNorm(p, in.FirstNorm); bn != nil {
					ev["first_norm"] = in.FirstNorm
					ev["drifting_channels"] = bn.Evidence["drifting_channels"]
					p.Emit(report.Warning, in.Name, 2, ev,
						"input %q has mean %.3g and std %.3g over the sample, and the running statistics of the first BatchNorm after it (%q), which hold the training data's view of this input, disagree with the sample there: the input is likely not preprocessed as in training",
						in.Name, m, s, in.FirstNorm)
					continue
				}
				p.Emit(report.Info, in.Name, 1, ev,
					"input %q has mean %.3g and std %.3g over the sample: not zero-centred unit scale, but within what common preprocessing gives (for example [−1, 1] audio, mostly-white images after ImageNet normalisation); make sure it matches training",
					in.Name, m, s)
			}
		}
	},
}

// confirmingNorm is the batchnorm-drift warning or error on node, if any.
func confirmingNorm(p *Pass, node string) *report.Finding {
	if node == "" {
		return nil
	}
	for _, f := range p.Prior() {
		if f.Check == "batchnorm-drift" && f.Node == node && f.Severity != report.Info {
			return &f
		}
	}
	return nil
}
