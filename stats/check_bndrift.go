package stats

import (
	"math"

	"github.com/vitals-health/vitals/report"
)

var batchnormDriftCheck = &Check{
	Name: "batchnorm-drift",
	Doc: "BatchNorm running statistics that disagree with the sample beyond its sampling error: per channel |μ_sample−μ_run|/σ_run and var_sample/var_run. " +
		"Inference normalises with the stored population statistics (Ioffe & Szegedy 2015), so when they do not match the data the layer shifts and rescales its output. " +
		"A channel drifts when its mean shift exceeds mean_shift and z standard errors of the sample mean (σ_sample/√n in σ_run units, n the number of samples), or its variance ratio leaves [var_low, var_high] by more than z standard errors of a log sample variance (√(2/(n−1)), normal data). " +
		"Running statistics still at BatchNorm's initial mean 0 and variance 1 are a broken model (an error on every such layer); trained running statistics that disagree mean the sample differs from the training data at this layer (preprocessing or data shift), " +
		"reported once, on the first drifting layer in depth order, naming the layers after it that drift too (information on synthetic input, which no training data resembles).",
	Defaults: map[string]float64{"batchnorm-drift.mean_shift": 1, "batchnorm-drift.var_low": 0.25, "batchnorm-drift.var_high": 4,
		"batchnorm-drift.channel_share": 0.1, "batchnorm-drift.error_share": 0.5, "batchnorm-drift.z": 3},
	Run: func(p *Pass) {
		n := float64(p.Report.Input.Samples)
		if n < 2 {
			n = 2
		}
		z := p.T("z")
		var first *BNStat
		var firstEv map[string]any
		var firstDrift int
		also := []string{}
		for bi := range p.BatchNorms {
			bn := &p.BatchNorms[bi]
			drift := 0
			worstShift, worstRatio := 0.0, 1.0
			for ch := range bn.MeanShift {
				s, v := bn.MeanShift[ch], bn.VarRatio[ch]
				se := math.Sqrt(math.Max(v, 0) / n) // standard error of the sample mean, in σ_run
				shifted := s > p.T("mean_shift") && s > z*se
				scaled := (v < p.T("var_low") || v > p.T("var_high")) && math.Abs(math.Log(v)) > z*math.Sqrt(2/(n-1))
				if shifted || scaled {
					drift++
				}
				worstShift = math.Max(worstShift, s)
				if math.Abs(math.Log(v)) > math.Abs(math.Log(worstRatio)) {
					worstRatio = v
				}
			}
			share := float64(drift) / float64(bn.Channels)
			ev := map[string]any{"drifting_channels": drift, "channels": bn.Channels, "samples": p.Report.Input.Samples,
				"max_mean_shift_sigmas": worstShift, "worst_var_ratio": worstRatio, "initial_running_statistics": bn.Initial}
			switch {
			case share < p.T("channel_share"):
			case bn.Initial:
				sev := report.Warning
				if share >= p.T("error_share") {
					sev = report.Error
				}
				p.Emit(sev, bn.Node, share/p.T("channel_share"), ev,
					"%d of %d channels: the sample's statistics disagree with the stored running statistics (largest mean shift %.2gσ, worst variance ratio %.3g). The running statistics are still BatchNorm's initial mean 0 and variance 1 in every channel: the model was exported before training updated them, or they were reset",
					drift, bn.Channels, worstShift, worstRatio)
			case first == nil:
				first, firstEv, firstDrift = bn, ev, drift
			default:
				also = append(also, bn.Node)
			}
			if bn.GammaZero > 0 || bn.VarZero > 0 {
				p.Emit(report.Info, bn.Node, 1, map[string]any{"gamma_zero_channels": bn.GammaZero, "running_var_zero_channels": bn.VarZero},
					"%d channels have scale γ≈0 (switched off) and %d have running variance ≈0", bn.GammaZero, bn.VarZero)
			}
		}
		if first != nil {
			firstEv["also"] = also
			if p.Report.Input.Source == "synthetic" {
				// generated noise differs from any training data: information
				p.Emit(report.Info, first.Node, 1, firstEv,
					"%d of %d channels drift from the stored running statistics, as expected on synthetic input: rerun with --data to judge this layer", firstDrift, first.Channels)
				return
			}
			msg := "%d of %d channels drift beyond the sampling error of %d samples (largest mean shift %.2gσ, worst variance ratio %.3g): the sample differs from the training data at this layer. " +
				"The model's running statistics are trained values; check that the sample is preprocessed as in training and drawn from the same kind of data"
			if len(also) > 0 {
				msg += "; %d later BatchNorm layers drift too, as a shift this early propagates"
				p.Emit(report.Warning, first.Node, float64(firstDrift)/float64(first.Channels)/p.T("channel_share"), firstEv, msg,
					firstDrift, first.Channels, p.Report.Input.Samples, firstEv["max_mean_shift_sigmas"], firstEv["worst_var_ratio"], len(also))
			} else {
				p.Emit(report.Warning, first.Node, float64(firstDrift)/float64(first.Channels)/p.T("channel_share"), firstEv, msg,
					firstDrift, first.Channels, p.Report.Input.Samples, firstEv["max_mean_shift_sigmas"], firstEv["worst_var_ratio"])
			}
		}
	},
}
