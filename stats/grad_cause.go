package stats

import (
	"fmt"
	"strings"

	"github.com/vitals-health/vitals/report"
)

// gradCause is a forward-pass finding that explains a gradient finding: a
// layer whose units are dead or saturated passes (almost) no gradient to the
// layers below it.
type gradCause struct {
	Check string  `json:"check"`
	Node  string  `json:"node"`
	Share float64 `json:"share"`
}

// causesAmong returns the layers (indices into Report.Layers) that the
// dead-units or saturation checks flag with the thresholds in force.
func causesAmong(p *Pass, layers []int) []gradCause {
	var out []gradCause
	for _, i := range layers {
		l := p.Report.Layers[i]
		if l.DeadFraction != nil && *l.DeadFraction >= p.Thresholds["dead-units.warning"] {
			out = append(out, gradCause{"dead-units", l.Node, *l.DeadFraction})
		}
		if l.SaturatedFraction != nil && i < len(p.LayerKind) && p.LayerKind[i] == ActSaturating && *l.SaturatedFraction >= p.Thresholds["saturation.warning"] {
			out = append(out, gradCause{"saturation", l.Node, *l.SaturatedFraction})
		}
	}
	return out
}

// causeText is the sentence naming the causes ("" without any).
func causeText(cs []gradCause) string {
	if len(cs) == 0 {
		return ""
	}
	var parts []string
	for i, c := range cs {
		if i == 4 {
			parts = append(parts, fmt.Sprintf("and %d more", len(cs)-4))
			break
		}
		what := "dead"
		if c.Check == "saturation" {
			what = "saturated"
		}
		parts = append(parts, fmt.Sprintf("%q (%s %s)", c.Node, pct(c.Share), what))
	}
	return " Explained by the forward pass: " + strings.Join(parts, ", ") + " (see their " + cs[0].Check + " findings) pass almost no gradient."
}

// gradStacks are the stacks whose every layer has a gradient RMS, at
// least minLayers long, without merges (a residual path carries gradient
// around the chain), with first/last the RMS at the shallowest and the
// deepest layer.
func gradStacks(p *Pass, minLayers int) (out []struct {
	st          Stack
	first, last *report.Layer
}) {
	for _, st := range p.Stacks {
		if st.Merged || len(st.Layers) < minLayers {
			continue
		}
		ok := true
		for _, i := range st.Layers {
			ok = ok && p.Report.Layers[i].GradRMS != nil
		}
		if !ok {
			continue
		}
		out = append(out, struct {
			st          Stack
			first, last *report.Layer
		}{st, &p.Report.Layers[st.Layers[0]], &p.Report.Layers[st.Layers[len(st.Layers)-1]]})
	}
	return out
}

func causesJSON(cs []gradCause) []any {
	out := make([]any, len(cs))
	for i, c := range cs {
		out[i] = map[string]any{"check": c.Check, "node": c.Node, "share": c.Share}
	}
	return out
}
