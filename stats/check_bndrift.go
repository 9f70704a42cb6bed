package stats

import (
	"math"

	"github.com/vitals-health/vitals/report"
)

var batchnormDriftCheck = &Check{
	Name: "batchnorm-drift",
	Doc: "BatchNorm running statistics that disagree with the data: per channel |μ_sample−μ_run|/σ_run and var_sample/var_run. " +
		"Inference normalises with the stored population statistics (Ioffe & Szegedy 2015), so when they do not match the data the layer shifts and rescales its output.",
	Defaults: map[string]float64{"batchnorm-drift.mean_shift": 1, "batchnorm-drift.var_low": 0.25, "batchnorm-drift.var_high": 4,
		"batchnorm-drift.channel_share": 0.1, "batchnorm-drift.error_share": 0.5},
	Run: func(p *Pass) {
		for _, bn := range p.BatchNorms {
			drift := 0
			worstShift, worstRatio := 0.0, 1.0
			for ch := range bn.MeanShift {
				s, v := bn.MeanShift[ch], bn.VarRatio[ch]
				if s > p.T("mean_shift") || v < p.T("var_low") || v > p.T("var_high") {
					drift++
				}
				worstShift = math.Max(worstShift, s)
				if math.Abs(math.Log(v)) > math.Abs(math.Log(worstRatio)) {
					worstRatio = v
				}
			}
			share := float64(drift) / float64(bn.Channels)
			if share >= p.T("channel_share") {
				sev := report.Warning
				if share >= p.T("error_share") {
					sev = report.Error
				}
				cause := "Usual causes: running statistics not updated or reset after training, different preprocessing at inference, or a data shift"
				if bn.Initial {
					cause = "The running statistics are still BatchNorm's initial mean 0 and variance 1 in every channel: the model was exported before training updated them, or they were reset"
				}
				p.Emit(sev, bn.Node, share/p.T("channel_share"), map[string]any{"drifting_channels": drift, "channels": bn.Channels,
					"max_mean_shift_sigmas": worstShift, "worst_var_ratio": worstRatio, "initial_running_statistics": bn.Initial},
					"%d of %d channels: the sample's statistics disagree with the stored running statistics (largest mean shift %.2gσ, worst variance ratio %.3g). %s",
					drift, bn.Channels, worstShift, worstRatio, cause)
			}
			if bn.GammaZero > 0 || bn.VarZero > 0 {
				p.Emit(report.Info, bn.Node, 1, map[string]any{"gamma_zero_channels": bn.GammaZero, "running_var_zero_channels": bn.VarZero},
					"%d channels have scale γ≈0 (switched off) and %d have running variance ≈0", bn.GammaZero, bn.VarZero)
			}
		}
	},
}
