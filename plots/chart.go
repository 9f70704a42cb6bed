package plots

import (
	"image/color"
	"io"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

const (
	chartHeightPx = 720
	legendWidthPx = 330
	noteHeightPx  = 26
)

// RenderChart draws a single-panel chart specification as a 1200×720 PNG:
// the plot on the left and its legend in a column on the right.
func RenderChart(w io.Writer, c *Chart) error {
	p, leg, err := buildChart(c)
	if err != nil {
		return err
	}
	return writePNG(w, widthPx, chartHeightPx, func(dc draw.Canvas) error {
		area := dc
		area.Max.X -= px(legendWidthPx)
		if c.Note != "" {
			area.Min.Y += px(noteHeightPx)
			st := sans(11)
			st.XAlign, st.YAlign = draw.XLeft, draw.YBottom
			dc.FillText(st, vg.Point{X: dc.Min.X + px(12), Y: dc.Min.Y + px(6)}, c.Note)
		}
		area.Max.Y -= px(8)
		p.Draw(area)
		lc := dc
		lc.Min.X = area.Max.X + px(16)
		lc.Max.Y -= px(70)
		leg.Draw(lc)
		return nil
	})
}

// buildChart turns a Chart into a gonum plot and a separate legend.
func buildChart(c *Chart) (*plot.Plot, plot.Legend, error) {
	p := plot.New()
	styleAxes(p, c.Title, c.XLabel, c.YLabel, 15, 13, 11)
	leg := plot.NewLegend()
	leg.TextStyle = sans(12)
	leg.Top, leg.Left = true, true
	leg.Padding = px(6)
	leg.ThumbnailWidth = px(34)

	keep := func(pts []Point) plotter.XYs { return xys(pts, c.LogY) }
	if c.Band != nil && !c.LogY {
		poly := append(keep(c.Band.Upper), reverse(keep(c.Band.Lower))...)
		if len(poly) >= 3 {
			pg, err := plotter.NewPolygon(poly)
			if err != nil {
				return nil, leg, err
			}
			pg.Color = c.Band.Color
			pg.LineStyle.Width = 0
			p.Add(pg)
			leg.Add(c.Band.Name, pg)
		}
	}
	for _, s := range c.Bars {
		b := &bars{s: s, pts: keep(s.Points), base: ymap(c.YMin, c.LogY)}
		p.Add(b)
		leg.Add(s.Name, b)
	}
	for _, h := range c.HLines {
		if c.LogY && h.Y <= 0 {
			continue
		}
		y := ymap(h.Y, c.LogY)
		l, err := plotter.NewLine(plotter.XYs{{X: c.XMin, Y: y}, {X: c.XMax, Y: y}})
		if err != nil {
			return nil, leg, err
		}
		l.LineStyle = lineStyle(h.Style, h.Color, 2)
		p.Add(l)
		leg.Add(h.Name, l)
	}
	for _, s := range c.Lines {
		pts := keep(s.Points)
		if len(pts) == 0 {
			continue
		}
		l, err := plotter.NewLine(pts)
		if err != nil {
			return nil, leg, err
		}
		l.LineStyle = lineStyle(s.Style, s.Color, 2.5)
		p.Add(l)
		thumbs := []plot.Thumbnailer{l}
		if s.Marks {
			sc, err := plotter.NewScatter(pts)
			if err != nil {
				return nil, leg, err
			}
			sc.GlyphStyle = draw.GlyphStyle{Color: s.Color, Radius: px(6), Shape: glyph(s.Shape)}
			p.Add(sc)
			thumbs = append(thumbs, sc)
		}
		if s.Name != "" {
			leg.Add(s.Name, thumbs...)
		}
	}
	for _, s := range c.Markers {
		pts := keep(s.Points)
		if len(pts) == 0 {
			continue
		}
		sc, err := plotter.NewScatter(pts)
		if err != nil {
			return nil, leg, err
		}
		sc.GlyphStyle = draw.GlyphStyle{Color: s.Color, Radius: px(7), Shape: glyph(s.Shape)}
		if s.Shape == Square {
			sc.GlyphStyle.Radius = px(8)
		}
		p.Add(sc)
		if s.Name != "" {
			leg.Add(s.Name, sc)
		}
	}
	p.X.Min, p.X.Max = c.XMin, c.XMax
	p.Y.Min, p.Y.Max = ymap(c.YMin, c.LogY), ymap(c.YMax, c.LogY)
	p.Y.Tick.Marker = fewTicks{n: 6}
	if c.LogY {
		p.Y.Tick.Marker = logTicks{}
	}
	if len(c.Ticks) > 0 {
		ts := make(plot.ConstantTicks, len(c.Ticks))
		for i, t := range c.Ticks {
			ts[i] = plot.Tick{Value: t.X, Label: t.Label}
		}
		p.X.Tick.Marker = ts
	}
	if c.RotateTicks {
		p.X.Tick.Label.Rotation = math.Pi / 2
		p.X.Tick.Label.XAlign = draw.XRight
		p.X.Tick.Label.YAlign = draw.YCenter
	}
	p.Add(plotter.NewGrid())
	return p, leg, nil
}

// styleAxes sets titles, labels and font sizes (points) of a plot.
func styleAxes(p *plot.Plot, title, xl, yl string, titleSize, labelSize, tickSize vg.Length) {
	p.Title.Text = title
	p.Title.TextStyle = sans(titleSize)
	p.Title.TextStyle.XAlign, p.Title.TextStyle.YAlign = draw.XCenter, draw.YTop
	p.Title.Padding = px(10)
	p.X.Label.Text, p.Y.Label.Text = xl, yl
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle = sans(labelSize)
		a.Label.TextStyle.XAlign, a.Label.TextStyle.YAlign = draw.XCenter, draw.YBottom
		a.Label.Padding = px(4)
		a.Tick.Label = sans(tickSize)
	}
	p.X.Tick.Label.XAlign, p.X.Tick.Label.YAlign = draw.XCenter, draw.YTop
	p.Y.Tick.Label.XAlign, p.Y.Tick.Label.YAlign = draw.XRight, draw.YCenter
}

func lineStyle(s Style, c color.Color, widthPx float64) draw.LineStyle {
	return draw.LineStyle{Color: c, Width: px(widthPx), Dashes: dashes(s)}
}

// xys converts points to gonum's form, dropping non-finite values and, on a
// log axis, values ≤ 0.
func xys(pts []Point, logY bool) plotter.XYs {
	out := make(plotter.XYs, 0, len(pts))
	for _, p := range pts {
		if !finite(p.X) || !finite(p.Y) || (logY && p.Y <= 0) {
			continue
		}
		out = append(out, plotter.XY{X: p.X, Y: ymap(p.Y, logY)})
	}
	return out
}

func reverse(xy plotter.XYs) plotter.XYs {
	out := make(plotter.XYs, len(xy))
	for i, p := range xy {
		out[len(xy)-1-i] = p
	}
	return out
}

// ymap maps y to the drawn coordinate: log10(y) on a log axis. Log axes are
// drawn as linear axes over log10 values (with logTicks labelling the
// powers of ten) because gonum places a log axis' label by the arithmetic
// midpoint of the range, which squeezes small plots.
func ymap(y float64, logY bool) float64 {
	if logY {
		return math.Log10(y)
	}
	return y
}

// logTicks labels the powers of ten and marks 2 and 5 times them as minor
// ticks, on an axis of log10 values. An axis spanning less than about two
// decades (fewer than two powers of ten on it) labels the 2× and 5× ticks
// too, so that a reader always has two numbers to read a point against.
type logTicks struct{}

func (logTicks) Ticks(lmin, lmax float64) []plot.Tick {
	labelAll := math.Floor(lmax)-math.Ceil(lmin) < 1
	var ts []plot.Tick
	for e := math.Floor(lmin); e <= math.Ceil(lmax); e++ {
		base := math.Pow(10, e)
		for _, m := range []float64{1, 2, 5} {
			v := m * base
			if lv := math.Log10(v); lv < lmin || lv > lmax {
				continue
			}
			t := plot.Tick{Value: math.Log10(v)}
			if m == 1 || labelAll {
				t.Label = trimFloat(v)
			}
			ts = append(ts, t)
		}
	}
	return ts
}

// trimFloat formats a power of ten compactly: 0.001, 0.01, …, 1000, 1e+06.
func trimFloat(v float64) string {
	if v >= 1e-4 && v < 1e5 {
		return plotFormat(v)
	}
	return plotFormatE(v)
}
