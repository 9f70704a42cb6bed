package stats

import (
	"github.com/vitals-health/vitals/report"
)

var symmetricUnitsCheck = &Check{
	Name: "symmetric-units",
	Doc: "Identical rows (filters or output units) in one weight tensor. " +
		"Units that start identical get identical gradients and never become different (symmetry breaking, common practice); usual cause: constant or zero initialisation.",
	Run: func(p *Pass) {
		for _, w := range p.Report.Weights {
			if w.IdenticalRows < 2 {
				continue
			}
			sev := report.Warning
			if w.IdenticalRows == w.Rows && w.Rows > 1 {
				sev = report.Error
			}
			p.Emit(sev, w.Node, 1+4*float64(w.IdenticalRows)/float64(w.Rows), map[string]any{"weight": w.Name, "identical_rows": w.IdenticalRows,
				"rows": w.Rows, "zero_rows": w.ZeroRows},
				"%d of %d units of weight %q are exact copies of another unit: they compute the same thing and were never symmetry-broken. Usual fix: random initialisation (Xavier/He), not constants or zeros",
				w.IdenticalRows, w.Rows, w.Name)
		}
	},
}
