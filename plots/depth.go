package plots

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/report"
)

// DepthProfileSpec describes depth-profile.png: how the activations of every
// activation layer are spread along depth (x = position among the activation
// layers in depth order).
//
// When the layer stds span at most two decades the y axis is linear and shows
// the mean ± std as a band, the mean as a line and the 1st and 99th
// percentiles as dashed and dotted lines. When the stds span more than two
// decades the y axis is logarithmic and shows the std and the width of the
// central 98% (P99 − P01); layers with a zero spread cannot be drawn there and
// are named in the note. Layers with warning or error findings get a triangle
// (error) or square (warning) marker. It returns nil when the report has no
// activation layer with statistics.
func DepthProfileSpec(r *report.Report) *Chart {
	layers := activationLayers(r)
	if len(layers) == 0 {
		return nil
	}
	var stds []float64
	for _, l := range layers {
		if s, ok := val(l.Std); ok {
			stds = append(stds, s)
		}
	}
	if len(stds) == 0 {
		return nil
	}
	names := make([]string, len(layers))
	for i, l := range layers {
		names[i] = l.Node
	}
	ticks, rot := nodeTicks(names)
	c := &Chart{
		File: "depth-profile.png", XLabel: "activation layer (depth order)",
		XMin: -0.5, XMax: float64(len(layers)) - 0.5, Ticks: ticks, RotateTicks: rot,
	}
	if decades(stds) > 2 {
		depthLog(c, layers)
	} else {
		depthLinear(c, layers)
	}
	addFlagMarkers(c, r, layers)
	return c
}

// depthLinear fills the linear mean ± std view.
func depthLinear(c *Chart, layers []*report.Layer) {
	c.Title = "Activation mean ± std and 1st/99th percentiles along depth"
	c.YLabel = "activation value"
	band := &Band{Name: "mean ± std", Color: bandBlue}
	mean := Series{Name: "mean", Color: inkNavy, Style: Solid}
	p01 := Series{Name: "1st percentile", Color: pctGreen, Style: Dashed}
	p99 := Series{Name: "99th percentile", Color: pctGreen, Style: Dotted}
	var ys []float64
	for i, l := range layers {
		x := float64(i)
		m, okm := val(l.Mean)
		s, oks := val(l.Std)
		if okm && oks {
			band.Lower = append(band.Lower, Point{x, m - s})
			band.Upper = append(band.Upper, Point{x, m + s})
			ys = append(ys, m-s, m+s)
		}
		if okm {
			mean.Points = append(mean.Points, Point{x, m})
			ys = append(ys, m)
		}
		if v, ok := val(l.P01); ok {
			p01.Points = append(p01.Points, Point{x, v})
			ys = append(ys, v)
		}
		if v, ok := val(l.P99); ok {
			p99.Points = append(p99.Points, Point{x, v})
			ys = append(ys, v)
		}
	}
	if len(band.Lower) > 0 {
		c.Band = band
	}
	for _, s := range []Series{mean, p01, p99} {
		if len(s.Points) > 0 {
			c.Lines = append(c.Lines, s)
		}
	}
	lo, hi := minMax(ys)
	pad := 0.06 * (hi - lo)
	if pad == 0 {
		pad = 0.5
	}
	c.YMin, c.YMax = lo-pad, hi+pad
}

// depthLog fills the log-scaled spread view.
func depthLog(c *Chart, layers []*report.Layer) {
	c.Title = "Activation spread along depth (log scale: std spans more than two decades)"
	c.YLabel = "std of activation (log scale)"
	c.LogY = true
	std := Series{Name: "std", Color: inkNavy, Style: Solid}
	width := Series{Name: "P99 − P01 (central 98% width)", Color: pctGreen, Style: Dashed}
	var ys []float64
	var zero []string
	for i, l := range layers {
		x := float64(i)
		if s, ok := val(l.Std); ok && s > 0 {
			std.Points = append(std.Points, Point{x, s})
			ys = append(ys, s)
		} else if ok {
			zero = append(zero, shortName(l.Node, 22))
		}
		lo, ok1 := val(l.P01)
		hi, ok2 := val(l.P99)
		if ok1 && ok2 && hi-lo > 0 {
			width.Points = append(width.Points, Point{x, hi - lo})
			ys = append(ys, hi-lo)
		}
	}
	for _, s := range []Series{std, width} {
		if len(s.Points) > 0 {
			c.Lines = append(c.Lines, s)
		}
	}
	lo, hi := minMax(ys)
	c.YMin, c.YMax = logRange(lo, hi)
	if len(zero) > 0 {
		c.Note = fmt.Sprintf("std 0 (not drawn on the log axis): %s", joinMax(zero, 6))
	}
}

// addFlagMarkers marks the layers with findings on the drawn centre line
// (the mean, or the std on a log axis).
func addFlagMarkers(c *Chart, r *report.Report, layers []*report.Layer) {
	fl := flagged(r)
	errs := Series{Name: "layer with an error finding", Shape: Triangle, Color: errorRed}
	warns := Series{Name: "layer with a warning finding", Shape: Square, Color: warnAmber}
	for i, l := range layers {
		lv := fl[l.Node]
		if lv == 0 {
			continue
		}
		y, ok := val(l.Mean)
		if c.LogY {
			y, ok = val(l.Std)
			ok = ok && y > 0
		}
		if !ok {
			continue
		}
		p := Point{float64(i), y}
		if lv >= 2 {
			errs.Points = append(errs.Points, p)
		} else {
			warns.Points = append(warns.Points, p)
		}
	}
	for _, s := range []Series{errs, warns} {
		if len(s.Points) > 0 {
			c.Markers = append(c.Markers, s)
		}
	}
}

func minMax(vs []float64) (lo, hi float64) {
	lo, hi = math.Inf(1), math.Inf(-1)
	for _, v := range vs {
		lo, hi = math.Min(lo, v), math.Max(hi, v)
	}
	if len(vs) == 0 {
		return 0, 1
	}
	return lo, hi
}

// joinMax joins at most n names and says how many more there are.
func joinMax(names []string, n int) string {
	s := ""
	for i, x := range names {
		if i == n {
			return s + fmt.Sprintf(" and %d more", len(names)-n)
		}
		if i > 0 {
			s += ", "
		}
		s += x
	}
	return s
}
