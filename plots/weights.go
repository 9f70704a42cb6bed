package plots

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/report"
)

// WeightsSpec describes weights.png: the gain g = std·√fan_in of every weight
// tensor in report order (the layer order), as points joined by a thin line,
// with the reference gains 1 (Xavier/Glorot, for tanh, sigmoid or no
// activation) and √2 (He, for the ReLU family) as horizontal lines. The y
// axis is logarithmic when the gains and references span more than one
// decade. It returns nil when no tensor has a finite gain.
func WeightsSpec(r *report.Report) *Chart {
	gain := Series{Name: "gain = std·√fan_in", Color: inkNavy, Shape: Circle}
	var names []string
	var ys []float64
	for i, w := range r.Weights {
		names = append(names, weightLabel(w))
		g, ok := val(w.Gain)
		if !ok {
			if s, oks := val(w.Std); oks && w.FanIn > 0 {
				g, ok = s*math.Sqrt(float64(w.FanIn)), true
			}
		}
		if ok {
			gain.Points = append(gain.Points, Point{float64(i), g})
			ys = append(ys, g)
		}
	}
	if len(gain.Points) == 0 {
		return nil
	}
	ticks, rot := nodeTicks(names)
	c := &Chart{
		File:   "weights.png",
		Title:  "Weight scale: gain std·√fan_in per tensor vs Xavier (1) and He (√2) references",
		XLabel: "weight tensor (layer order)", YLabel: "gain std·√fan_in",
		XMin: -0.5, XMax: float64(len(r.Weights)) - 0.5, Ticks: ticks, RotateTicks: rot,
		HLines: []HLine{
			{Name: "Xavier/Glorot reference gain 1", Y: 1, Style: Dashed, Color: refTeal},
			{Name: "He reference gain √2 ≈ 1.41", Y: math.Sqrt2, Style: Solid, Color: refPurple},
		},
	}
	gain.Marks = true
	c.Lines = []Series{gain}
	all := append(ys, 1, math.Sqrt2)
	lo, hi := minMax(all)
	if decades(all) > 1 && lo > 0 {
		c.LogY = true
		c.YLabel = "gain std·√fan_in (log scale)"
		c.YMin, c.YMax = logRange(lo, hi)
	} else {
		c.YMin, c.YMax = math.Min(0, lo), hi*1.15
	}
	var zero int
	for _, p := range gain.Points {
		if p.Y <= 0 {
			zero++
		}
	}
	if zero > 0 {
		c.Note = fmt.Sprintf("%d tensor(s) with gain 0", zero)
	}
	return c
}

// weightLabel names a weight tensor by its node (shortened), or its own name.
func weightLabel(w report.Weight) string {
	if w.Node != "" {
		return w.Node
	}
	return w.Name
}
