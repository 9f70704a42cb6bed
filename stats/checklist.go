package stats

import (
	"github.com/vitals-health/vitals/internal/actkind"

	"fmt"
	"math"

	"github.com/vitals-health/vitals/report"
)

// sevFor grades v against warning/error thresholds (higher is worse).
func sevFor(v, warn, errT float64) (report.Severity, bool) {
	switch {
	case v >= errT:
		return report.Error, true
	case v >= warn:
		return report.Warning, true
	}
	return "", false
}

func pct(x float64) string { return fmt.Sprintf("%.1f%%", 100*x) }

var nonfiniteCheck = &Check{
	Name: "nonfinite",
	Doc: "NaN or Inf in an activation or a weight. Any non-finite value propagates to the output; " +
		"the first layer where it appears is usually the cause (overflow in exp, division by zero, a diverged training run). Common practice.",
	Run: func(p *Pass) {
		first := true
		for _, l := range p.Report.Layers {
			if l.Nonfinite == 0 {
				continue
			}
			msg := "%d of %d values are NaN or Inf"
			strength := 1.0
			if first {
				msg += "; this is the first layer in depth order where they appear, so look here first"
				strength = 3
				first = false
			}
			p.Emit(report.Error, l.Node, strength, map[string]any{"nonfinite": l.Nonfinite, "count": l.Count}, msg, l.Nonfinite, l.Count)
		}
		for _, w := range p.Report.Weights {
			if w.Nonfinite > 0 {
				p.Emit(report.Error, w.Node, 5, map[string]any{"weight": w.Name, "nonfinite": w.Nonfinite},
					"weight %q holds %d NaN/Inf values: the checkpoint is corrupt or training diverged; retrain or restore an earlier checkpoint", w.Name, w.Nonfinite)
			}
		}
	},
}

var deadUnitsCheck = &Check{
	Name: "dead-units",
	Doc: "ReLU-family and smooth ReLU-like units (GELU, SiLU/Swish, Mish, ELU, HardSwish) that never output a positive value over the whole sample. " +
		"A dead unit passes no gradient and is wasted capacity. Common practice: trained ReLU nets often carry 10–20% dead units; far more points to a too-high learning rate, poor initialisation or badly scaled inputs.",
	Defaults: map[string]float64{"dead-units.warning": 0.25, "dead-units.error": 0.5, "dead-units.min_samples": 32},
	Run: func(p *Pass) {
		for _, l := range p.Report.Layers {
			if l.DeadFraction == nil || l.Units == nil {
				continue
			}
			f := *l.DeadFraction
			sev, ok := sevFor(f, p.T("warning"), p.T("error"))
			if !ok {
				continue
			}
			dead := int(math.Round(f * float64(*l.Units)))
			msg := "%d of %d units (%s) never output a positive value on %d samples; dead units pass no gradient. " +
				"Usual fixes: lower the learning rate, He initialisation, LeakyRelu, check the input scale"
			if l.Note != "" {
				msg += " (" + l.Note + ")"
			}
			// With few samples a unit may just not have been excited yet (common practice):
			// the verdict stays a warning and says so.
			if n := p.Report.Input.Samples; float64(n) < p.T("min_samples") {
				sev = report.Warning
				msg += fmt.Sprintf(". Only %d samples were run: rerun on more data before trusting this", n)
			}
			p.Emit(sev, l.Node, f/p.T("warning"), map[string]any{"dead_fraction": f, "dead_units": dead, "units": *l.Units,
				"unit_axis": l.UnitAxis, "samples": p.Report.Input.Samples, "warning_at": p.T("warning"), "error_at": p.T("error")},
				msg, dead, *l.Units, pct(f), p.Report.Input.Samples)
		}
	},
}

var saturationCheck = &Check{
	Name: "saturation",
	Doc: "Share of tanh/sigmoid/softsign/softplus outputs pinned at their limits (tanh |y|>0.99; sigmoid y<0.01 or y>0.99; softplus y<0.01; hard variants at their clip bounds). " +
		"Saturated units pass almost no gradient (common practice). Usual causes: inputs not normalised, weights too large.",
	Defaults: map[string]float64{"saturation.warning": 0.2, "saturation.error": 0.5},
	Run: func(p *Pass) {
		for i, l := range p.Report.Layers {
			if l.SaturatedFraction == nil || p.LayerKind[i] != ActSaturating {
				continue
			}
			f := *l.SaturatedFraction
			sev, ok := sevFor(f, p.T("warning"), p.T("error"))
			if !ok {
				continue
			}
			p.Emit(sev, l.Node, f/p.T("warning"), map[string]any{"saturated_fraction": f, "mean": l.Mean, "std": l.Std,
				"warning_at": p.T("warning"), "error_at": p.T("error")},
				"%s of %s outputs sit at the saturation limits, where the gradient is nearly zero. Usual fixes: normalise the inputs, smaller initial weights (Xavier), a normalisation layer before the activation",
				pct(f), l.Op)
		}
	},
}

func stackSpread(p *Pass, st Stack) (first, last *report.Layer, ratio float64) {
	first, last = &p.Report.Layers[st.Layers[0]], &p.Report.Layers[st.Layers[len(st.Layers)-1]]
	return first, last, report.Val(last.Std) / report.Val(first.Std)
}

// spreadFinding is one stack whose spread ratio crossed a line.
type spreadFinding struct {
	st          Stack
	first, last *report.Layer
	ratio       float64
	others      []string // the last layers of other stacks from the same first layer that crossed it too
}

// spreadOutliers are the stacks of at least min_layers layers whose ratio
// last/first crosses the line (beyond(ratio) true), one per first layer:
// the stacks of a network with branches (residual blocks end one stack per
// branch) share their first layer, and one finding on the worst of them,
// naming how many others crossed the line too, says what they all say.
func spreadOutliers(p *Pass, beyond func(float64) bool, worse func(a, b float64) bool) []spreadFinding {
	byFirst := map[string]int{}
	var out []spreadFinding
	for _, st := range p.Stacks {
		if len(st.Layers) < int(p.T("min_layers")) {
			continue
		}
		first, last, ratio := stackSpread(p, st)
		if math.IsNaN(ratio) || !beyond(ratio) {
			continue
		}
		i, seen := byFirst[first.Node]
		if !seen {
			byFirst[first.Node] = len(out)
			out = append(out, spreadFinding{st: st, first: first, last: last, ratio: ratio, others: []string{}})
			continue
		}
		f := &out[i]
		if worse(ratio, f.ratio) {
			f.others = append(f.others, f.last.Node)
			f.st, f.last, f.ratio = st, last, ratio
		} else {
			f.others = append(f.others, last.Node)
		}
	}
	return out
}

// alsoText is the sentence on the other stacks of a spread finding.
func alsoText(f spreadFinding) string {
	if len(f.others) == 0 {
		return ""
	}
	return fmt.Sprintf(" %d other layers downstream of %q cross the line too.", len(f.others), f.first.Node)
}

var spreadCollapseCheck = &Check{
	Name: "spread-collapse",
	Doc: "Activation spread (std) shrinking along a stack of layers with no normalisation between them, last layer against first. " +
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
				"ratio": f.ratio, "layers": len(f.st.Layers), "first": f.first.Node, "compound_gain": compoundGain(p, f.st), "also": f.others},
				"activation std falls from %.3g at %q to %.3g here over %d layers (ratio %.2g): the signal vanishes with depth.%s Usual fixes: Xavier/He initialisation for the activation used, normalisation layers",
				report.Val(f.first.Std), f.first.Node, report.Val(f.last.Std), len(f.st.Layers), f.ratio, alsoText(f))
		}
	},
}

var spreadExplosionCheck = &Check{
	Name: "spread-explosion",
	Doc: "Activation spread (std) growing along a stack of layers with no normalisation between them, last layer against first. " +
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
				"ratio": f.ratio, "layers": len(f.st.Layers), "first": f.first.Node, "compound_gain": compoundGain(p, f.st), "also": f.others},
				"activation std grows from %.3g at %q to %.3g here over %d layers (ratio %.3g): the signal explodes with depth.%s Usual fixes: smaller initial weights (Xavier/He), normalisation layers, gradient clipping",
				report.Val(f.first.Std), f.first.Node, report.Val(f.last.Std), len(f.st.Layers), f.ratio, alsoText(f))
		}
	},
}

// referenceGain is √2 for the ReLU family and the ReLU-like units
// (actkind.HeGain; He et al. 2015) and 1 otherwise (Glorot & Bengio 2010).
func referenceGain(follow string) float64 {
	if actkind.HeGain(follow) {
		return math.Sqrt2
	}
	return 1
}

// compoundGain is ∏ g/ref over the stack's weights, which predicts the spread ratio.
func compoundGain(p *Pass, st Stack) *float64 {
	prod := 1.0
	if len(st.Weights) == 0 {
		return nil
	}
	for _, wi := range st.Weights {
		w := p.Report.Weights[wi]
		prod *= report.Val(w.Gain) / referenceGain(w.FollowedBy)
	}
	return report.Num(prod)
}

// initRule is the weight gain g = std·√fan_in one initialisation rule gives.
type initRule struct {
	name string
	gain float64
}

// initRules are the gains the usual initialisation rules give a layer of
// this fan-in and fan-out before the activation that follows (fanOut 0:
// unknown, the forward rule alone).
//
//	ReLU family: Var = 2/fan_in → √2 (He et al. 2015, forward case);
//	  Var = 2/fan_out → √(2·fan_in/fan_out) (their backward case, which they
//	  show works as well; frameworks' "fan_out" mode, used by the common
//	  ResNet and MobileNet definitions); Glorot's normalised rule with the
//	  rectifier gain √2, Var = 4/(fan_in+fan_out) → √(4·fan_in/(fan_in+fan_out))
//	  (common practice: the gain argument of frameworks' Xavier initialisers).
//	others: Var = 1/fan_in → 1; Var = 1/fan_out → √(fan_in/fan_out);
//	  Var = 2/(fan_in+fan_out) → √(2·fan_in/(fan_in+fan_out)) (Glorot &
//	  Bengio 2010, the normalised initialisation of their eq. 16).
func initRules(follow string, fanIn, fanOut int) []initRule {
	ref := referenceGain(follow)
	k, he := ref*ref, ref != 1 // the activation's variance factor: 2 for the ReLU family
	rules := []initRule{{"He, fan-in (√2)", ref}}
	if !he {
		rules[0].name = "Xavier/LeCun, fan-in (1)"
	}
	if fanIn <= 0 || fanOut <= 0 {
		return rules
	}
	in, out := float64(fanIn), float64(fanOut)
	if he {
		return append(rules, initRule{"He, fan-out", math.Sqrt(k * in / out)}, initRule{"Glorot normalised with gain √2", math.Sqrt(2 * k * in / (in + out))})
	}
	return append(rules, initRule{"fan-out", math.Sqrt(in / out)}, initRule{"Glorot normalised", math.Sqrt(2 * in / (in + out))})
}

var weightScaleCheck = &Check{
	Name: "weight-scale",
	Doc: "Weight gain g = std·√fan_in against the gains the usual initialisation rules give for the activation that follows: Var = 2/fan_in or 2/fan_out for the ReLU family (He et al. 2015, forward and backward cases), " +
		"1/fan_in, 1/fan_out or 2/(fan_in+fan_out) otherwise (Glorot & Bengio 2010); a warning when g is outside [low, high]× every one of them. " +
		"Also the compound gain ∏(g/ref) along a stack, with ref the forward rule's √2 or 1, which predicts the spread ratio of a plain chain (He et al. 2015, eq. 10); not for stacks through a residual Add, a Concat or a gating Mul, whose other path adds its own variance. " +
		"Skipped where a normalisation layer follows, since it rescales the output.",
	Defaults: map[string]float64{"weight-scale.low": 0.5, "weight-scale.high": 2, "weight-scale.compound_low": 0.1, "weight-scale.compound_high": 10},
	Run: func(p *Pass) {
		for _, w := range p.Report.Weights {
			if w.FollowedBy == "normalization" || w.Gain == nil {
				continue
			}
			rules := initRules(w.FollowedBy, w.FanIn, w.FanOut)
			near, ratio, fits := rules[0], *w.Gain/rules[0].gain, false
			for _, r := range rules {
				q := *w.Gain / r.gain
				fits = fits || (q >= p.T("low") && q <= p.T("high"))
				if math.Abs(math.Log(q)) < math.Abs(math.Log(ratio)) {
					near, ratio = r, q
				}
			}
			if fits {
				continue
			}
			if *w.Gain == 0 {
				p.Emit(report.Warning, w.Node, 3, map[string]any{"weight": w.Name, "gain": 0.0, "std": w.Std, "fan_in": w.FanIn},
					"every entry of weight %q has the same value (std 0): the layer cannot tell its inputs apart. Usual cause: constant or zero initialisation", w.Name)
				continue
			}
			strength := math.Max(ratio/p.T("high"), p.T("low")/math.Max(ratio, 1e-30))
			// PyTorch's default for Conv and Linear, U(±1/√fan_in), gives
			// g = 1/√3 (a value from the framework's source, common
			// practice): usual, but not a scale-preserving rule before a ReLU
			frameworkDefault := math.Abs(*w.Gain*math.Sqrt(3)-1) < 0.05
			forward := *w.Gain / rules[0].gain // the forward rule's gain preserves the spread
			note := ""
			if frameworkDefault {
				note = " This is the framework default U(±1/√fan_in) (gain 1/√3), which does not preserve the scale here."
			}
			p.Emit(report.Warning, w.Node, math.Min(strength, 3), map[string]any{"weight": w.Name, "gain": *w.Gain, "reference": near.gain, "rule": near.name,
				"ratio": ratio, "fan_in": w.FanIn, "fan_out": w.FanOut, "std": w.Std, "followed_by": w.FollowedBy, "framework_default": frameworkDefault,
				"forward_factor": forward},
				"weight %q has gain std·√fan_in = %.3g, %.2g× the nearest usual initialisation (%s, %.3g) for %s; without normalisation it scales the spread of the signal passing forward by about %.2g× (He et al. 2015, eq. 10).%s",
				w.Name, *w.Gain, ratio, near.name, near.gain, followName(w.FollowedBy), forward, note)
		}
		for _, st := range p.Stacks {
			if st.Merged { // He et al. 2015 eq. 10 holds along a plain chain only
				continue
			}
			cg := compoundGain(p, st)
			if cg == nil || len(st.Weights) < 2 || (*cg >= p.T("compound_low") && *cg <= p.T("compound_high")) {
				continue
			}
			last := p.Report.Layers[st.Layers[len(st.Layers)-1]]
			p.Emit(report.Warning, last.Node, 1, map[string]any{"compound_gain": *cg, "weights": len(st.Weights)},
				"the product of weight gains over the %d linear layers of this stack is %.3g× the reference: the spread is predicted to change that much with depth",
				len(st.Weights), *cg)
		}
	},
}

func followName(f string) string {
	if f == "none" || f == "" {
		return "a layer with no activation after it"
	}
	return "a " + f + " that follows"
}

var symmetricUnitsCheck = &Check{
	Name: "symmetric-units",
	Doc: "Identical rows (filters or output units) in one weight tensor. " +
		"Units that start identical get identical gradients and never become different (symmetry breaking, common practice); usual cause: constant or zero initialisation.",
	Run: func(p *Pass) {
		for _, w := range p.Report.Weights {
			if w.IdenticalRows < 2 {
				continue
			}
			sev := report.Warning
			if w.IdenticalRows == w.Rows && w.Rows > 1 {
				sev = report.Error
			}
			p.Emit(sev, w.Node, 1+4*float64(w.IdenticalRows)/float64(w.Rows), map[string]any{"weight": w.Name, "identical_rows": w.IdenticalRows,
				"rows": w.Rows, "zero_rows": w.ZeroRows},
				"%d of %d units of weight %q are exact copies of another unit: they compute the same thing and were never symmetry-broken. Usual fix: random initialisation (Xavier/He), not constants or zeros",
				w.IdenticalRows, w.Rows, w.Name)
		}
	},
}

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

var outputHealthCheck = &Check{
	Name: "output-health",
	Doc: "The final output over the sample: mean top probability (overconfident or near-uniform), and with labels the accuracy and mean cross-entropy against ln C. " +
		"Common practice: an untrained C-class softmax has loss ≈ ln C.",
	Defaults: map[string]float64{"output-health.overconfident": 0.99, "output-health.uniform_factor": 1.5},
	Run: func(p *Pass) {
		o := p.Report.Output
		if o == nil || o.MeanMaxProb == nil {
			return
		}
		mp := *o.MeanMaxProb
		ev := map[string]any{"mean_max_prob": mp, "classes": o.Classes, "is_distribution": o.IsDistribution}
		switch {
		case mp > p.T("overconfident"):
			p.Emit(report.Info, o.Name, 1, ev, "mean top-class probability is %.4f: the model is near-certain on almost every sample", mp)
		case mp < p.T("uniform_factor")/float64(o.Classes):
			p.Emit(report.Info, o.Name, 1, ev, "mean top-class probability is %.3f over %d classes: outputs are close to uniform, as an untrained model's would be", mp, o.Classes)
		}
		if o.Accuracy != nil {
			ev2 := map[string]any{"accuracy": *o.Accuracy, "cross_entropy": o.CrossEntropy, "ln_classes": o.LnClasses, "labeled": o.Labeled}
			p.Emit(report.Info, o.Name, 1, ev2, "accuracy %.1f%% on %d labelled samples; mean cross-entropy %.3f (ln %d = %.3f is chance level)",
				100**o.Accuracy, o.Labeled, report.Val(o.CrossEntropy), o.Classes, report.Val(o.LnClasses))
		}
	},
}
