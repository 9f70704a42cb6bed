package stats

import (
	"math"

	"github.com/vitals-health/vitals/report"
)

// referenceGain is √2 for the ReLU family (He et al. 2015) and 1 otherwise (Glorot & Bengio 2010).
func referenceGain(follow string) float64 {
	if reluLike[follow] || follow == "Clip" {
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
