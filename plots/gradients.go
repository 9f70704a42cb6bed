package plots

import (
	"fmt"

	"github.com/vitals-health/vitals/report"
)

// GradientDepthSpec describes gradient-depth.png: along the activation
// layers in depth order, the RMS of the activation gradient dL/dy and the
// activation spread (std), each divided by its value at the deepest layer
// that has it, on a log axis: a curve falling to the left by decades is a
// signal (spread) or a gradient vanishing towards the input. It returns nil
// without a backward pass or without two layers with a gradient.
func GradientDepthSpec(r *report.Report) *Chart {
	if r.Gradients == nil {
		return nil
	}
	layers := activationLayers(r)
	gradS := Series{Name: "gradient RMS (dL/dy)", Color: errorRed, Shape: Triangle, Marks: true}
	stdS := Series{Name: "activation std", Color: inkNavy, Shape: Circle, Style: Dashed, Marks: true}
	var gLast, sLast float64
	for i := len(layers) - 1; i >= 0 && (gLast == 0 || sLast == 0); i-- {
		if v, ok := val(layers[i].GradRMS); ok && v > 0 && gLast == 0 {
			gLast = v
		}
		if v, ok := val(layers[i].Std); ok && v > 0 && sLast == 0 {
			sLast = v
		}
	}
	if gLast == 0 {
		return nil
	}
	names := make([]string, len(layers))
	var ys []float64
	zero := 0
	for i, l := range layers {
		names[i] = l.Node
		if v, ok := val(l.GradRMS); ok {
			if v > 0 {
				gradS.Points = append(gradS.Points, Point{float64(i), v / gLast})
				ys = append(ys, v/gLast)
			} else {
				zero++
			}
		}
		if v, ok := val(l.Std); ok && v > 0 && sLast > 0 {
			stdS.Points = append(stdS.Points, Point{float64(i), v / sLast})
			ys = append(ys, v/sLast)
		}
	}
	if len(gradS.Points) < 2 {
		return nil
	}
	ticks, rot := nodeTicks(names)
	lo, hi := minMax(append(ys, 1))
	c := &Chart{
		File:   "gradient-depth.png",
		Title:  "Gradient RMS and activation spread along depth, relative to the deepest layer",
		XLabel: "activation layer (depth order)", YLabel: "÷ value at the deepest layer (log scale)",
		XMin: -0.5, XMax: float64(len(layers)) - 0.5, Ticks: ticks, RotateTicks: rot, LogY: true,
		Lines:  []Series{gradS, stdS},
		HLines: []HLine{{Name: "deepest layer", Y: 1, Style: Dotted, Color: oldGrey}},
	}
	c.YMin, c.YMax = logRange(lo, hi)
	if zero > 0 {
		c.Note = fmt.Sprintf("%d layer(s) with a gradient of exactly 0 cannot be drawn on the log axis", zero)
	}
	return c
}

// UpdateRatioSpec describes update-ratio.png: the predicted plain-SGD
// update ratio lr·‖dL/dW‖/‖W‖ of every weight tensor (layer order), log
// axis, with the rule of thumb 1e-3 (common practice) and the
// update-ratio check's low and high thresholds as dotted lines. It
// returns nil without a learning rate.
func UpdateRatioSpec(r *report.Report) *Chart {
	if r.Gradients == nil || r.Gradients.LR == nil {
		return nil
	}
	s := Series{Name: "lr·‖dL/dW‖/‖W‖", Color: inkNavy, Shape: Circle}
	var names []string
	ys := []float64{1e-3}
	for i, w := range r.Weights {
		names = append(names, weightLabel(w))
		if v, ok := val(w.UpdateRatio); ok && v > 0 {
			s.Points = append(s.Points, Point{float64(i), v})
			ys = append(ys, v)
		}
	}
	if len(s.Points) == 0 {
		return nil
	}
	low, high := r.Thresholds["update-ratio.low"], r.Thresholds["update-ratio.high"]
	if low <= 0 || high <= low {
		low, high = 1e-5, 1e-1
	}
	ys = append(ys, low, high)
	n := float64(len(r.Weights))
	ticks, rot := nodeTicks(names)
	lo, hi := minMax(ys)
	c := &Chart{
		File:   "update-ratio.png",
		Title:  fmt.Sprintf("Predicted SGD update ratio per weight at learning rate %g", *r.Gradients.LR),
		XLabel: "weight tensor (layer order)", YLabel: "lr·‖dL/dW‖/‖W‖ (log scale)",
		XMin: -0.5, XMax: n - 0.5, Ticks: ticks, RotateTicks: rot, LogY: true,
		Markers: []Series{s},
		HLines: []HLine{
			{Name: "rule of thumb 1e-3 (common practice)", Y: 1e-3, Style: Dashed, Color: refPurple},
			{Name: "update-ratio high " + plotFormatE(high), Y: high, Style: Dotted, Color: errorRed},
			{Name: "update-ratio low " + plotFormatE(low), Y: low, Style: Dotted, Color: warnAmber},
		},
	}
	c.YMin, c.YMax = logRange(lo, hi)
	return c
}
