package plots

import (
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// bars draws one bar per point, s.Width data units wide and shifted by
// s.Offset, from base up to the point's y value.
type bars struct {
	s    Series
	pts  plotter.XYs
	base float64
}

// Plot implements plot.Plotter.
func (b *bars) Plot(c draw.Canvas, p *plot.Plot) {
	trX, trY := p.Transforms(&c)
	for _, pt := range b.pts {
		x0 := trX(pt.X + b.s.Offset - b.s.Width/2)
		x1 := trX(pt.X + b.s.Offset + b.s.Width/2)
		y0, y1 := trY(b.base), trY(pt.Y)
		rect := []vg.Point{{X: x0, Y: y0}, {X: x1, Y: y0}, {X: x1, Y: y1}, {X: x0, Y: y1}}
		c.FillPolygon(b.s.Color, c.ClipPolygonXY(rect))
	}
}

// DataRange implements plot.DataRanger.
func (b *bars) DataRange() (xmin, xmax, ymin, ymax float64) {
	xmin, xmax, ymin, ymax = plotter.XYRange(b.pts)
	return xmin + b.s.Offset - b.s.Width/2, xmax + b.s.Offset + b.s.Width/2, min(ymin, b.base), ymax
}

// Thumbnail implements plot.Thumbnailer for the legend.
func (b *bars) Thumbnail(c *draw.Canvas) {
	r := c.Rectangle
	c.FillPolygon(b.s.Color, []vg.Point{r.Min, {X: r.Max.X, Y: r.Min.Y}, r.Max, {X: r.Min.X, Y: r.Max.Y}})
}
