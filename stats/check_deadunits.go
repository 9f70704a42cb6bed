package stats

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/report"
)

var deadUnitsCheck = &Check{
	Name: "dead-units",
	Doc: "ReLU-family and smooth ReLU-like units (GELU, SiLU/Swish, Mish, ELU, HardSwish) that never output a positive value over the whole sample, graded by both their share and their count. " +
		"A dead unit passes no gradient and is wasted capacity. Common practice: trained ReLU nets often carry 10–20% dead units; far more points to a too-high learning rate, poor initialisation or badly scaled inputs. " +
		"A warning needs at least min_dead dead units and an error at least min_dead_error: if each unit were dead independently with the 20% typical of trained nets, half a layer would be dead by chance with probability 36% for 1 of 2 units, 5.6% for 4 of 8 and 0.7% for 8 of 16 (binomial), so one unit of a 2-unit layer is never an error. " +
		"The dead count is also taken after the first half of the batches: if it was still falling in the second half fast enough that another half-sample falling as fast would give a milder verdict, the sample has not yet excited every unit: the verdict is provisional and graded as that projected count (information when it is under the warning line). " +
		"Units in a layer that only feeds a gate (a squeeze-and-excitation bottleneck) are information: the gate they shape is judged by gate-constant. " +
		"Below min_samples samples the verdict is at most a warning: a unit active on a share q of inputs is seen with probability 1−(1−q)^n, 95% for q = 3% only from n ≈ 100 on.",
	Defaults: map[string]float64{"dead-units.warning": 0.25, "dead-units.error": 0.5, "dead-units.min_samples": 100,
		"dead-units.min_dead": 2, "dead-units.min_dead_error": 8},
	Run: func(p *Pass) {
		for i, l := range p.Report.Layers {
			if l.DeadFraction == nil || l.Units == nil {
				continue
			}
			f := *l.DeadFraction
			dead := int(math.Round(f * float64(*l.Units)))
			sev, ok := sevFor(f, p.T("warning"), p.T("error"))
			if !ok || float64(dead) < p.T("min_dead") {
				continue
			}
			msg := fmt.Sprintf("%d of %d units (%s) never output a positive value on %d samples; dead units pass no gradient",
				dead, *l.Units, pct(f), p.Report.Input.Samples)
			if l.Note != "" {
				msg += " (" + l.Note + ")"
			}
			var why []string
			if sev == report.Error && float64(dead) < p.T("min_dead_error") {
				sev = report.Warning
				why = append(why, fmt.Sprintf("only %d units are dead, too few for an error", dead))
			}
			// provisional: the count was still falling in the second half;
			// the verdict is the one the count projected another half-sample
			// ahead (falling as fast) earns, information if none
			provisional := false
			if l.DeadAtHalf != nil && *l.DeadAtHalf > dead {
				projected := float64(2*dead-*l.DeadAtHalf) / float64(*l.Units)
				ps, pok := sevFor(projected, p.T("warning"), p.T("error"))
				if !pok {
					ps = report.Info
				}
				if ps.Level() < sev.Level() {
					provisional, sev = true, ps
					why = append(why, fmt.Sprintf("provisional: %d units were dead after half the sample and %d at the end, so the count was still falling; rerun on more varied data", *l.DeadAtHalf, dead))
				}
			}
			if n := p.Report.Input.Samples; float64(n) < p.T("min_samples") {
				if sev.Level() > report.Warning.Level() {
					sev = report.Warning
				}
				why = append(why, fmt.Sprintf("only %d samples were run (under %g): rerun on more data before trusting this", n, p.T("min_samples")))
			}
			if l.Role == RoleBranch {
				sev = report.Info
				why = append(why, "this layer only feeds a gate (the bottleneck of a squeeze-and-excitation branch): its dead units narrow what the gate can express, and gate-constant judges the gate itself")
			}
			if sev != report.Info {
				// what to do, only where the verdict asks for action
				msg += ". Usual fixes: lower the learning rate, He initialisation, LeakyRelu, check the input scale"
			}
			for _, w := range why {
				msg += ". " + upperFirst(w)
			}
			ev := map[string]any{"dead_fraction": f, "dead_units": dead, "units": *l.Units,
				"unit_axis": l.UnitAxis, "samples": p.Report.Input.Samples, "warning_at": p.T("warning"), "error_at": p.T("error"),
				"dead_at_half": l.DeadAtHalf, "provisional": provisional}
			addFeed(p, i, ev)
			p.Emit(sev, l.Node, f/p.T("warning"), ev, "%s", msg)
		}
	},
}

// addFeed names in evidence the weight of the linear layer feeding layer i
// (no normalisation between them), where weight-scale looks for a cause.
func addFeed(p *Pass, i int, ev map[string]any) {
	if wi, ok := p.FeedWeight[i]; ok && wi < len(p.Report.Weights) {
		ev["fed_by"] = p.Report.Weights[wi].Name
	}
}

func upperFirst(s string) string {
	if s == "" || s[0] < 'a' || s[0] > 'z' {
		return s
	}
	return string(s[0]-'a'+'A') + s[1:]
}
