package stats

import "github.com/vitals-health/vitals/report"

// attentionCollapseCheck: heads whose attention is almost one-hot.
var attentionCollapseCheck = &Check{
	Name: "attention-collapse",
	Doc: "Attention heads whose attention is almost one-hot: mean normalised entropy H/ln K near 0. " +
		"Zhai et al. 2023 (Stabilizing Transformer Training by Preventing Attention Entropy Collapse) link collapsing attention entropy to unstable training " +
		"(loss spikes, divergence); the usual cause is query/key weights or logits grown too large. The paper gives no fixed threshold: " +
		"below 0.2 (warning) and 0.1 (error) are common practice (a head that puts 0.9 on one of 128 keys and spreads the rest scores about 0.17). Rows with a single attendable key are left out of the mean and counted as one-hot rows.",
	Defaults: map[string]float64{"attention-collapse.warning": 0.2, "attention-collapse.error": 0.1},
	Run: func(p *Pass) {
		r := p.Report
		for _, i := range tfLayers(r, "attention-probabilities") {
			l := r.Layers[i]
			for h, e := range l.AttentionEntropy {
				warn, errT := p.T("warning"), p.T("error")
				if e >= warn {
					continue
				}
				sev := report.Warning
				if e < errT {
					sev = report.Error
				}
				ev := map[string]any{"block": *l.Block, "head": h, "entropy": e, "warning_below": warn, "error_below": errT}
				if h < len(l.AttentionMaxProb) {
					ev["max_prob"] = l.AttentionMaxProb[h]
				}
				if h < len(l.AttentionOneHotRows) {
					ev["one_hot_rows"] = l.AttentionOneHotRows[h]
				}
				p.Emit(sev, l.Node, warn/max(e, 1e-3), ev,
					"block %d, head %d: mean normalised attention entropy %.3f (1 = uniform, 0 = one-hot), mean max probability %.3f: the head attends to one key. "+
						"Entropy collapse goes with unstable training (Zhai et al. 2023); look at the scale of this head's query/key weights, or use QK normalisation or σReparam",
					*l.Block, h, e, ev["max_prob"])
			}
		}
	},
}
