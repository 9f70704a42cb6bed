package stats

import (
	"fmt"
	"github.com/vitals-health/vitals/internal/actkind"
	"math"
	"strings"

	"github.com/vitals-health/vitals/report"
)

// referenceGain is √2 for the ReLU family (He et al. 2015) and 1 otherwise (Glorot & Bengio 2010).
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

// weightJudgement is one weight's gain against the usual initialisation rules.
type weightJudgement struct {
	w       report.Weight
	near    initRule
	ratio   float64 // gain / the nearest rule's gain
	fits    bool    // within [low, high]× some rule
	forward float64 // gain / the forward rule's: the factor on the spread passing forward
}

// judgeWeights judges every weight with a gain and no normalisation after it, by name.
func judgeWeights(p *Pass) map[string]weightJudgement {
	out := map[string]weightJudgement{}
	for _, w := range p.Report.Weights {
		if w.FollowedBy == "normalization" || w.Gain == nil || *w.Gain == 0 {
			continue
		}
		rules := initRules(w.FollowedBy, w.FanIn, w.FanOut)
		j := weightJudgement{w: w, near: rules[0], ratio: *w.Gain / rules[0].gain, forward: *w.Gain / rules[0].gain}
		for _, r := range rules {
			q := *w.Gain / r.gain
			j.fits = j.fits || (q >= p.T("low") && q <= p.T("high"))
			if math.Abs(math.Log(q)) < math.Abs(math.Log(j.ratio)) {
				j.near, j.ratio = r, q
			}
		}
		out[w.Name] = j
	}
	return out
}

func (j weightJudgement) text() string {
	s := fmt.Sprintf("weight %q has gain std·√fan_in = %.3g, %.2g× the nearest usual initialisation (%s, %.3g) for %s", j.w.Name, *j.w.Gain, j.ratio, j.near.name, j.near.gain, followName(j.w.FollowedBy))
	// PyTorch's default for Conv and Linear, U(±1/√fan_in), gives g = 1/√3
	// (a value from the framework's source, common practice)
	if math.Abs(*j.w.Gain*math.Sqrt(3)-1) < 0.05 {
		s += ", the framework default U(±1/√fan_in)"
	}
	return s
}

var weightScaleCheck = &Check{
	Name: "weight-scale",
	Doc: "A weight whose gain g = std·√fan_in is far from every usual initialisation rule, named as the likely cause inside the dead-units, saturation or spread finding it explains; never a finding by itself. " +
		"Far means outside [low, high]× every rule for the activation that follows, in the direction that explains the finding (too large before dead or saturated units). " +
		"The rules: Var = 2/fan_in or 2/fan_out for the ReLU family (He et al. 2015, forward and backward cases), 1/fan_in, 1/fan_out or 2/(fan_in+fan_out) otherwise (Glorot & Bengio 2010). " +
		"A trained network's weights legitimately leave the initialisation scale (BatchNorm folded into a convolution, fixed signal-processing bases, recurrent matrices, the last classifier layer), so a gain alone is evidence, shown in the weights table and plot, never a finding by itself; " +
		"its consequences are: weights too large before dead or saturated units, the compound gain ∏(g/ref) along a plain chain predicting its spread ratio (He et al. 2015, eq. 10). " +
		"Skipped where a normalisation layer follows, since it rescales the output.",
	Defaults: map[string]float64{"weight-scale.low": 0.5, "weight-scale.high": 2, "weight-scale.compound_low": 0.1, "weight-scale.compound_high": 10},
	Run: func(p *Pass) {
		judged := judgeWeights(p)
		prior := p.Prior()
		for k := range prior {
			f := &prior[k]
			var names []string
			large := true // the direction that explains the finding
			switch f.Check {
			case "dead-units", "saturation":
				if n, ok := f.Evidence["fed_by"].(string); ok {
					names = []string{n}
				}
			case "spread-collapse", "spread-explosion":
				names, _ = f.Evidence["weights"].([]string)
				large = f.Check == "spread-explosion"
			default:
				continue
			}
			var causes []string
			worst := 1.0
			for _, n := range names {
				j, ok := judged[n]
				if !ok || j.fits || (j.ratio > 1) != large {
					continue
				}
				causes = append(causes, j.text())
				if math.Abs(math.Log(j.ratio)) > math.Abs(math.Log(worst)) {
					worst = j.ratio
				}
			}
			// along a plain chain the compound gain predicts the spread ratio
			if cg, ok := f.Evidence["compound_gain"].(float64); ok && f.Evidence["plain"] == true &&
				((large && cg > p.T("compound_high")) || (!large && cg < p.T("compound_low"))) {
				causes = append(causes, fmt.Sprintf("the product of the weight gains along this chain, ∏(g/ref) = %.3g, predicts that ratio", cg))
				if math.Abs(math.Log(cg)) > math.Abs(math.Log(worst)) {
					worst = cg
				}
			}
			if len(causes) == 0 {
				continue
			}
			f.Evidence["likely_cause"] = causes
			f.Evidence["cause_gain_ratio"] = worst
			f.Message += ". Likely cause: " + strings.Join(causes, "; ") + " (He et al. 2015, eq. 10: each layer scales the spread by about its g/ref)"
		}
	},
}

func followName(f string) string {
	if f == "none" || f == "" {
		return "a layer with no activation after it"
	}
	return "a " + f + " that follows"
}
