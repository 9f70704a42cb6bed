package stats

var saturationCheck = &Check{
	Name: "saturation",
	Doc: "Share of a hidden tanh/sigmoid/softsign/softplus activation's outputs pinned at their limits (tanh |y|>0.99; sigmoid y<0.01 or y>0.99; softplus y<0.01; hard variants at their clip bounds). " +
		"Saturated units pass almost no gradient (common practice). Usual causes: inputs not normalised, weights too large. " +
		"Only hidden activations are judged, by their role in the graph: an output head (a graph output, or reaching one only through reshaping and post-processing) is meant to be confident; " +
		"a gate (its output multiplies a larger tensor, as in squeeze-and-excitation) is judged by gate-constant; an elementwise gate (multiplying another tensor of its own size: a recurrent cell's gates written out as ops, a gated linear unit) is meant to open and close; the sigmoid of x·σ(x) passes x or 0 when pinned, as a ReLU does.",
	Defaults: map[string]float64{"saturation.warning": 0.2, "saturation.error": 0.5},
	Run: func(p *Pass) {
		for i, l := range p.Report.Layers {
			if l.SaturatedFraction == nil || p.LayerKind[i] != ActSaturating || (l.Role != RoleHidden && l.Role != "") {
				continue
			}
			f := *l.SaturatedFraction
			sev, ok := sevFor(f, p.T("warning"), p.T("error"))
			if !ok {
				continue
			}
			ev := map[string]any{"saturated_fraction": f, "mean": l.Mean, "std": l.Std, "role": l.Role,
				"warning_at": p.T("warning"), "error_at": p.T("error")}
			addFeed(p, i, ev)
			p.Emit(sev, l.Node, f/p.T("warning"), ev,
				"%s of %s outputs sit at the saturation limits, where the gradient is nearly zero. Usual fixes: normalise the inputs, smaller initial weights (Xavier), a normalisation layer before the activation",
				pct(f), l.Op)
		}
	},
}
