package plots

import (
	"fmt"

	"github.com/vitals-health/vitals/report"
)

// UnitHealthSpec describes unit-health.png: for every activation layer in
// depth order, the fraction of dead units (ReLU family: never > 0 on the
// sample) and of saturated units (tanh/sigmoid family: pinned at a limit) as
// side-by-side bars on a 0..1 axis, with the dead-units and saturation
// warning and error thresholds as horizontal lines (r.Thresholds, defaults
// 0.25/0.5 and 0.2/0.5). A fraction the statistics did not measure is not
// drawn. It returns nil when no activation layer has either fraction.
func UnitHealthSpec(r *report.Report) *Chart {
	layers := activationLayers(r)
	dead := Series{Name: "dead units", Color: slateBar, Width: 0.36, Offset: -0.19}
	sat := Series{Name: "saturated units", Color: ochreBar, Width: 0.36, Offset: 0.19}
	names := make([]string, len(layers))
	for i, l := range layers {
		names[i] = l.Node
		if v, ok := val(l.DeadFraction); ok {
			dead.Points = append(dead.Points, Point{float64(i), v})
		}
		if v, ok := val(l.SaturatedFraction); ok {
			sat.Points = append(sat.Points, Point{float64(i), v})
		}
	}
	if len(dead.Points)+len(sat.Points) == 0 {
		return nil
	}
	ticks, rot := nodeTicks(names)
	c := &Chart{
		File:   "unit-health.png",
		Title:  "Dead and saturated units per activation layer, with warning/error thresholds",
		XLabel: "activation layer (depth order)", YLabel: "fraction of units",
		XMin: -0.6, XMax: float64(len(layers)) - 0.4, YMin: 0, YMax: 1,
		Ticks: ticks, RotateTicks: rot,
	}
	for _, s := range []Series{dead, sat} {
		if len(s.Points) > 0 {
			c.Bars = append(c.Bars, s)
		}
	}
	c.HLines = thresholdLines(r)
	return c
}

// thresholdLines returns the four threshold lines, merging checks whose
// thresholds coincide so that no line hides another.
func thresholdLines(r *report.Report) []HLine {
	type th struct {
		check, level string
		v            float64
	}
	ths := []th{
		{"dead-units", "warning", threshold(r, "dead-units.warning", 0.25)},
		{"saturation", "warning", threshold(r, "saturation.warning", 0.2)},
		{"dead-units", "error", threshold(r, "dead-units.error", 0.5)},
		{"saturation", "error", threshold(r, "saturation.error", 0.5)},
	}
	var out []HLine
	for i, t := range ths {
		style, col := Dashed, warnAmber
		if t.level == "error" {
			style, col = Solid, errorRed
		}
		name := fmt.Sprintf("%s %s ≥ %.2f", t.check, t.level, t.v)
		if i%2 == 0 && ths[i+1].v == t.v {
			out = append(out, HLine{Name: fmt.Sprintf("dead-units & saturation %s ≥ %.2f", t.level, t.v), Y: t.v, Style: style, Color: col})
			continue
		}
		if i%2 == 1 && ths[i-1].v == t.v {
			continue
		}
		if t.check == "saturation" {
			style = Dotted
			if t.level == "error" {
				style = Dashed
			}
		}
		out = append(out, HLine{Name: name, Y: t.v, Style: style, Color: col})
	}
	return out
}
