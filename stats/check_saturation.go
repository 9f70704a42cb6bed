package stats

var saturationCheck = &Check{
	Name: "saturation",
	Doc: "Share of tanh/sigmoid/softsign outputs pinned at their limits (tanh |y|>0.99; sigmoid y<0.01 or y>0.99; hard variants at their clip bounds). " +
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
