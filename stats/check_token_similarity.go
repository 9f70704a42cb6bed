package stats

import "github.com/vitals-health/vitals/report"

// tokenSimilarityCheck: token representations becoming parallel with depth (rank collapse).
var tokenSimilarityCheck = &Check{
	Name: "token-similarity",
	Doc: "Token vectors of a sequence becoming nearly parallel with depth: mean pairwise cosine similarity near 1 at the end of the residual stream. " +
		"Dong, Cordonnier & Loukas 2021 (Attention is not all you need) show that pure attention loses rank doubly exponentially with depth, skip connections and MLPs counteract it; " +
		"a stream whose tokens all point the same way can no longer tell positions apart. Thresholds are common practice: the last residual tensor at ≥ 0.9 (warning) or ≥ 0.99 (error) " +
		"and at least 0.2 above the first. When the last tensor carries massive activations (see massive-activations) the finding is information only: a value every token shares makes the vectors parallel.",
	Defaults: map[string]float64{"token-similarity.warning": 0.9, "token-similarity.error": 0.99, "token-similarity.rise": 0.2},
	Run: func(p *Pass) {
		r := p.Report
		var sims []int
		for _, i := range tfLayers(r, "residual-stream") {
			if r.Layers[i].TokenSimilarity != nil {
				sims = append(sims, i)
			}
		}
		if len(sims) < 2 {
			return
		}
		first, last := r.Layers[sims[0]], r.Layers[sims[len(sims)-1]]
		a, b := *first.TokenSimilarity, *last.TokenSimilarity
		if b < p.T("warning") || b-a < p.T("rise") {
			return
		}
		sev := report.Warning
		if b >= p.T("error") {
			sev = report.Error
		}
		// a massive feature shared by every token (Sun et al. 2024) makes the
		// vectors parallel without the rest of the representation collapsing
		if m := p.Thresholds["massive-activations.ratio"]; m > 0 && last.MaxOverMedian != nil && *last.MaxOverMedian >= m {
			p.Emit(report.Info, last.Node, 1, map[string]any{"block": *last.Block, "first": a, "last": b, "max_over_median": *last.MaxOverMedian},
				"block %d, residual tensor %d: token vectors are nearly parallel (mean cosine %.3f, up from %.3f), but this tensor carries massive activations "+
					"(max/median %.0f) that every token shares: the similarity is theirs; see massive-activations", *last.Block, *last.ResidualIndex, b, a, *last.MaxOverMedian)
			return
		}
		p.Emit(sev, last.Node, (b-a)/p.T("rise"), map[string]any{"block": *last.Block, "first": a, "last": b, "first_node": first.Node},
			"block %d, residual tensor %d: mean pairwise cosine similarity of a sequence's token vectors is %.3f, up from %.3f at %s: "+
				"the tokens are collapsing onto one direction with depth (rank collapse, Dong et al. 2021); check the residual connections and the MLP blocks",
			*last.Block, *last.ResidualIndex, b, a, first.Node)
	},
}
