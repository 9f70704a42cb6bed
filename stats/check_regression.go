package stats

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/report"
)

// Comparison status of a NEW finding against OLD.
const (
	StatusNew       = "new"
	StatusWorse     = "worse"
	StatusUnchanged = "unchanged"
)

var regressionCheck = &Check{
	Name: "regression",
	Doc: "Marks each warning or error of NEW as new, worse or unchanged against OLD (the same check on the matched layer), so that one line states each problem once. " +
		"Also a warning on a layer whose dead or saturated share grew by more than dead_increase or saturation_increase from OLD to NEW while staying under that check's own line, which shows training moving the layer toward the problem (common practice).",
	Defaults: map[string]float64{"regression.dead_increase": 0.1, "regression.saturation_increase": 0.1},
	Run: func(p *Pass) {
		if p.Baseline == nil {
			return
		}
		type checkNode struct{ check, node string }
		oldSev := map[checkNode]report.Severity{}
		for _, f := range p.Baseline.Report.Findings {
			node := f.Node
			if nn, ok := p.OldToNew[node]; ok {
				node = nn
			}
			k := checkNode{f.Check, node}
			if f.Severity.Level() > oldSev[k].Level() {
				oldSev[k] = f.Severity
			}
		}
		have := map[checkNode]bool{}
		prior := p.Prior()
		for i := range prior {
			f := &prior[i]
			have[checkNode{f.Check, f.Node}] = true
			if f.Severity == report.Info {
				continue
			}
			prev, seen := oldSev[checkNode{f.Check, f.Node}]
			status, before := StatusUnchanged, "no finding"
			if seen {
				before = string(prev)
			}
			switch {
			case !seen || prev == report.Info:
				status = StatusNew
			case prev.Level() < f.Severity.Level():
				status = StatusWorse
			}
			f.Evidence["compare"] = status
			f.Evidence["old"] = before
			switch status {
			case StatusNew:
				f.Message = "NEW (no such finding in OLD): " + f.Message
				f.Strength++ // a new problem ranks above the same problem carried over
			case StatusWorse:
				f.Message = fmt.Sprintf("WORSE (OLD: %s): %s", before, f.Message)
				f.Strength++
			default:
				f.Message = "unchanged from OLD: " + f.Message
			}
		}
		if p.Report.Compare == nil {
			return
		}
		for _, d := range p.Report.Compare.Layers {
			for _, q := range []struct {
				check, what string
				old, new    *float64
				limit       float64
			}{{"dead-units", "dead", d.DeadOld, d.DeadNew, p.T("dead_increase")}, {"saturation", "saturated", d.SaturatedOld, d.SaturatedNew, p.T("saturation_increase")}} {
				if q.old == nil || q.new == nil || have[checkNode{q.check, d.Node}] {
					continue
				}
				if inc := *q.new - *q.old; inc > q.limit {
					p.Emit(report.Warning, d.Node, inc/q.limit, map[string]any{"check": q.check, "old": *q.old, "new": *q.new, "increase": inc, "compare": StatusWorse},
						"the %s share grew from %s in OLD to %s in NEW (by more than %s), though still under %s's own line: training is moving this layer toward the problem",
						q.what, pct(*q.old), pct(*q.new), pct(q.limit), q.check)
				}
			}
		}
	},
}

// medianChange is the median of the finite relative weight changes (NaN when fewer than min).
func medianChange(p *Pass, min int) float64 {
	ch := p.WeightChanges
	if len(ch) < min || len(ch) == 0 {
		return math.NaN()
	}
	s := append([]float64{}, ch...)
	sortFloats(s)
	return s[len(s)/2]
}

var frozenLayerCheck = &Check{
	Name: "frozen-layer",
	Doc: "A weight tensor that moved between OLD and NEW by less than ratio × the median relative change ‖W_new − W_old‖/‖W_old‖ of all weights: the layer looks frozen (not trained, or its gradient vanished). " +
		"Needs at least min_weights weights compared (common practice).",
	Defaults: map[string]float64{"frozen-layer.ratio": 0.01, "frozen-layer.min_weights": 3},
	Run: func(p *Pass) {
		med := medianChange(p, int(p.T("min_weights")))
		if p.Report.Compare == nil || !(med > 0) {
			return
		}
		for _, wd := range p.Report.Compare.Weights {
			if wd.RelativeChange == nil || *wd.RelativeChange >= med*p.T("ratio") {
				continue
			}
			rc := *wd.RelativeChange
			p.Emit(report.Warning, wd.Node, 1, map[string]any{"weight": wd.Name, "relative_change": rc, "median_relative_change": med, "compare": StatusNew},
				"weight %q moved by %.2g of its norm between the checkpoints, under %g× the median layer's %.2g: the layer looks frozen (not trained, or its gradient vanished)", wd.Name, rc, p.T("ratio"), med)
		}
	},
}

var outOfProportionCheck = &Check{
	Name: "changed-out-of-proportion",
	Doc: "A weight tensor that moved between OLD and NEW by more than ratio × the median relative change of all weights: check this layer's learning rate and gradients. " +
		"Needs at least min_weights weights compared (common practice).",
	Defaults: map[string]float64{"changed-out-of-proportion.ratio": 10, "changed-out-of-proportion.min_weights": 3},
	Run: func(p *Pass) {
		med := medianChange(p, int(p.T("min_weights")))
		if p.Report.Compare == nil || !(med > 0) {
			return
		}
		for _, wd := range p.Report.Compare.Weights {
			if wd.RelativeChange == nil || *wd.RelativeChange <= med*p.T("ratio") {
				continue
			}
			rc := *wd.RelativeChange
			p.Emit(report.Warning, wd.Node, 1, map[string]any{"weight": wd.Name, "relative_change": rc, "median_relative_change": med, "compare": StatusNew},
				"weight %q moved by %.2g of its norm between the checkpoints, over %g× the median layer's %.2g: check this layer's learning rate and gradients", wd.Name, rc, p.T("ratio"), med)
		}
	},
}
