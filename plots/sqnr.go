package plots

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/report"
)

// SQNRSpec is compare-sqnr.png: for a comparison of a float model with a
// quantized (or float16) one, the SQNR of every matched layer in NEW's depth
// order, 10·log10(Σx²/Σ(x−x̂)²) dB, with the layer where it drops most
// marked. Nil when no layer has an SQNR. Layers whose tensors are identical
// (infinite SQNR) are left out and counted in the note.
func SQNRSpec(r *report.Report) *Chart {
	if r.Compare == nil {
		return nil
	}
	var nodes []string
	var ys []float64
	for _, d := range r.Compare.Layers {
		if v, ok := val(d.SQNRdB); ok {
			nodes = append(nodes, d.Node)
			ys = append(ys, v)
		}
	}
	if len(nodes) == 0 {
		return nil
	}
	line := Series{Name: "SQNR", Style: Solid, Color: newMagenta, Marks: true, Shape: Circle}
	worst, drop := -1, 0.0
	for i, y := range ys {
		line.Points = append(line.Points, Point{float64(i), y})
		if i > 0 && ys[i-1]-y > drop {
			worst, drop = i, ys[i-1]-y
		}
	}
	ticks, rot := nodeTicks(nodes)
	lo, hi := minMax(ys)
	c := &Chart{
		File:   "compare-sqnr.png",
		Title:  "SQNR of NEW against OLD along depth",
		XLabel: "layer (depth order)", YLabel: "SQNR (dB)",
		XMin: -0.5, XMax: float64(len(nodes)) - 0.5, Ticks: ticks, RotateTicks: rot,
		YMin: math.Min(0, lo), YMax: math.Max(hi*1.1, 1),
		Lines: []Series{line},
	}
	if worst >= 0 {
		c.Markers = []Series{{Name: fmt.Sprintf("largest drop: %s (−%.1f dB)", nodes[worst], drop), Shape: Square, Color: errorRed,
			Points: []Point{{float64(worst), ys[worst]}}}}
	}
	return c
}
