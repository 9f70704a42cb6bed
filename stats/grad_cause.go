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

// spreadCause is the stack's own spread-collapse (collapse true) or
// spread-explosion finding, when its activation std ratio last/first is past
// that check's warning threshold: the forward signal shrinking or growing
// along the same layers.
func spreadCause(p *Pass, st Stack, collapse bool) []gradCause {
	first, last := p.Report.Layers[st.Layers[0]], p.Report.Layers[st.Layers[len(st.Layers)-1]]
	if first.Std == nil || last.Std == nil || *first.Std <= 0 {
		return nil
	}
	r := *last.Std / *first.Std
	if collapse && r < p.Thresholds["spread-collapse.warning"] {
		return []gradCause{{"spread-collapse", last.Node, r}}
	}
	if !collapse && r > p.Thresholds["spread-explosion.warning"] {
		return []gradCause{{"spread-explosion", last.Node, r}}
	}
	return nil
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
		switch c.Check {
		case "spread-collapse", "spread-explosion":
			parts = append(parts, fmt.Sprintf("the activation std ratio %.2g along the same layers (%s at %q)", c.Share, c.Check, c.Node))
		case "saturation":
			parts = append(parts, fmt.Sprintf("%q (%s saturated)", c.Node, pct(c.Share)))
		default:
			parts = append(parts, fmt.Sprintf("%q (%s dead)", c.Node, pct(c.Share)))
		}
	}
	return " Explained by the forward pass (see those findings): " + strings.Join(parts, ", ") + "."
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
