package stats

import "github.com/vitals-health/vitals/report"

var gateConstantCheck = &Check{
	Name: "gate-constant",
	Doc: "Channels of a gate (a Sigmoid/HardSigmoid whose output multiplies a larger tensor, as in squeeze-and-excitation) that stayed at a bound on every sample. " +
		"A channel whose gate is always ≈0 is pruned in effect; one always ≈1 passes through, the gate does nothing there. " +
		"Both are legitimate outcomes of training, so counts are information; a warning only when the whole gate is constant on the sample, which leaves the block's gating unused. " +
		"Judged for gates with one value per channel and sample ([N, C] or [N, C, 1, 1]).",
	Run: func(p *Pass) {
		for _, l := range p.Report.Layers {
			if l.Role != RoleGate || l.GateOff == nil || l.GateOn == nil || l.Units == nil {
				continue
			}
			off, on, n := *l.GateOff, *l.GateOn, *l.Units
			if off+on == 0 {
				continue
			}
			ev := map[string]any{"channels": n, "always_off": off, "always_on": on, "samples": p.Report.Input.Samples}
			if off+on == n {
				p.Emit(report.Warning, l.Node, 1, ev, "every one of the %d gate channels is constant over the sample (%d always ≈0, %d always ≈1): this gate does not depend on its input", n, off, on)
				continue
			}
			p.Emit(report.Info, l.Node, 1, ev, "%d of %d gate channels are always ≈0 (pruned in effect) and %d always ≈1 (passed through) over the sample", off, n, on)
		}
	},
}
