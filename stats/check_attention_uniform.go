package stats

import "github.com/vitals-health/vitals/report"

// attentionUniformCheck: heads that attend (almost) uniformly.
var attentionUniformCheck = &Check{
	Name: "attention-uniform",
	Doc: "Attention heads that attend almost uniformly to every key: mean normalised entropy H/ln K near 1. " +
		"Such a head averages its values and carries no positional or content selection; normal at initialisation, worth a look in a trained model " +
		"(the head may be prunable). Information only; the threshold 0.99 is common practice.",
	Defaults: map[string]float64{"attention-uniform.above": 0.99},
	Run: func(p *Pass) {
		r := p.Report
		for _, i := range tfLayers(r, "attention-probabilities") {
			l := r.Layers[i]
			for h, e := range l.AttentionEntropy {
				if e < p.T("above") {
					continue
				}
				p.Emit(report.Info, l.Node, 1, map[string]any{"block": *l.Block, "head": h, "entropy": e, "above": p.T("above")},
					"block %d, head %d: mean normalised attention entropy %.4f: the head attends almost uniformly and selects nothing", *l.Block, h, e)
			}
		}
	},
}
