package stats

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/report"
)

var deadUnitsCheck = &Check{
	Name: "dead-units",
	Doc: "ReLU-family units that never output a positive value over the whole sample. " +
		"A dead unit passes no gradient and is wasted capacity. Common practice: trained ReLU nets often carry 10–20% dead units; far more points to a too-high learning rate, poor initialisation or badly scaled inputs.",
	Defaults: map[string]float64{"dead-units.warning": 0.25, "dead-units.error": 0.5, "dead-units.min_samples": 32},
	Run: func(p *Pass) {
		for _, l := range p.Report.Layers {
			if l.DeadFraction == nil || l.Units == nil {
				continue
			}
			f := *l.DeadFraction
			sev, ok := sevFor(f, p.T("warning"), p.T("error"))
			if !ok {
				continue
			}
			dead := int(math.Round(f * float64(*l.Units)))
			msg := "%d of %d units (%s) never output a positive value on %d samples; dead units pass no gradient. " +
				"Usual fixes: lower the learning rate, He initialisation, LeakyRelu, check the input scale"
			if l.Note != "" {
				msg += " (" + l.Note + ")"
			}
			// With few samples a unit may just not have been excited yet (common practice):
			// the verdict stays a warning and says so.
			if n := p.Report.Input.Samples; float64(n) < p.T("min_samples") {
				sev = report.Warning
				msg += fmt.Sprintf(". Only %d samples were run: rerun on more data before trusting this", n)
			}
			p.Emit(sev, l.Node, f/p.T("warning"), map[string]any{"dead_fraction": f, "dead_units": dead, "units": *l.Units,
				"unit_axis": l.UnitAxis, "samples": p.Report.Input.Samples, "warning_at": p.T("warning"), "error_at": p.T("error")},
				msg, dead, *l.Units, pct(f), p.Report.Input.Samples)
		}
	},
}
