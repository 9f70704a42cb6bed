package plots

import (
	"io"
	"math"
	"strconv"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

const (
	pageTitlePx = 56
	panelRowPx  = 290
)

// RenderPage draws a page of histogram panels as a 1200 px wide PNG, one
// gonum plot per tile of a draw.Tiles grid aligned with plot.Align.
func RenderPage(w io.Writer, pg *Page) error {
	rows := make([][]*plot.Plot, pg.Rows)
	for j := range rows {
		rows[j] = make([]*plot.Plot, pg.Cols)
	}
	for i := range pg.Panels {
		if i >= pg.Rows*pg.Cols {
			break
		}
		p, err := buildPanel(&pg.Panels[i])
		if err != nil {
			return err
		}
		rows[i/pg.Cols][i%pg.Cols] = p
	}
	top := float64(pageTitlePx)
	if len(pg.Legend) > 0 {
		top += 14
	}
	h := top + float64(pg.Rows)*panelRowPx + 10
	tiles := draw.Tiles{
		Rows: pg.Rows, Cols: pg.Cols,
		PadTop: px(top), PadBottom: px(8), PadLeft: px(8), PadRight: px(14),
		PadX: px(18), PadY: px(16),
	}
	return writePNG(w, widthPx, h, func(dc draw.Canvas) error {
		st := sans(16)
		st.XAlign, st.YAlign = draw.XLeft, draw.YTop
		dc.FillText(st, vg.Point{X: dc.Min.X + px(14), Y: dc.Max.Y - px(12)}, pg.Title)
		if len(pg.Legend) > 0 {
			drawPageLegend(dc, pg.Legend)
		}
		for j := range rows {
			for i, p := range rows[j] {
				if p != nil {
					p.Draw(tiles.At(dc, i, j))
				}
			}
		}
		return nil
	})
}

// drawPageLegend draws the overlay styles (e.g. OLD dashed, NEW solid) in
// the top right corner of a page.
func drawPageLegend(dc draw.Canvas, hs []Hist) {
	leg := plot.NewLegend()
	leg.TextStyle = sans(13)
	leg.Top, leg.Left = true, true
	leg.ThumbnailWidth = px(44)
	for _, h := range hs {
		l, err := plotter.NewLine(plotter.XYs{{X: 0, Y: 0}, {X: 1, Y: 0}})
		if err != nil {
			continue
		}
		l.LineStyle = lineStyle(h.Style, h.Color, 3)
		leg.Add(h.Name, l)
	}
	lc := dc
	lc.Min.X = dc.Max.X - px(150)
	lc.Max.Y -= px(6)
	leg.Draw(lc)
}

// buildPanel turns a histogram panel into a small gonum plot.
func buildPanel(pn *Panel) (*plot.Plot, error) {
	p := plot.New()
	styleAxes(p, pn.Title, pn.XLabel, pn.YLabel, 11, 10, 9)
	p.Title.Padding = px(4)
	floor := 0.0
	if pn.LogY {
		floor = pn.YMin
	}
	for _, h := range pn.Hists {
		pts := stepOutline(h, floor)
		if pn.LogY {
			for i := range pts {
				pts[i].Y = math.Log10(pts[i].Y)
			}
		}
		if len(pts) < 2 {
			continue
		}
		if h.Fill {
			pg, err := plotter.NewPolygon(pts)
			if err != nil {
				return nil, err
			}
			pg.Color = h.Color
			pg.LineStyle = lineStyle(h.Style, darker(h.Color), 1)
			p.Add(pg)
			continue
		}
		l, err := plotter.NewLine(pts)
		if err != nil {
			return nil, err
		}
		l.LineStyle = lineStyle(h.Style, h.Color, 2)
		p.Add(l)
	}
	p.X.Min, p.X.Max = pn.XMin, pn.XMax
	p.Y.Min, p.Y.Max = ymap(pn.YMin, pn.LogY), ymap(pn.YMax, pn.LogY)
	p.X.Tick.Marker = fewTicks{n: 4}
	p.Y.Tick.Marker = fewTicks{n: 4}
	if pn.LogY {
		p.Y.Tick.Marker = logTicks{}
	}
	return p, nil
}

// stepOutline is the closed step curve of a histogram, starting and ending on
// floor; counts below floor (on a log axis) are raised to it, non-finite
// counts dropped to it.
func stepOutline(h Hist, floor float64) plotter.XYs {
	if len(h.Edges) != len(h.Counts)+1 || len(h.Counts) == 0 {
		return nil
	}
	pts := plotter.XYs{{X: h.Edges[0], Y: floor}}
	for i, c := range h.Counts {
		if !finite(c) || c < floor {
			c = floor
		}
		pts = append(pts, plotter.XY{X: h.Edges[i], Y: c}, plotter.XY{X: h.Edges[i+1], Y: c})
	}
	return append(pts, plotter.XY{X: h.Edges[len(h.Edges)-1], Y: floor})
}

// tickLabel formats a multiple of step with just the decimals step needs.
func tickLabel(v, step float64) string {
	dec := 0
	for s := step; dec < 10 && math.Abs(s-math.Round(s)) > 1e-9*step; s *= 10 {
		dec++
	}
	return strconv.FormatFloat(v, 'f', dec, 64)
}

// fewTicks places about n nicely rounded labelled ticks (narrow panels).
type fewTicks struct{ n int }

func (t fewTicks) Ticks(lo, hi float64) []plot.Tick {
	if !(hi > lo) {
		return []plot.Tick{{Value: lo, Label: num(lo)}}
	}
	raw := (hi - lo) / float64(t.n)
	mag := math.Pow(10, math.Floor(math.Log10(raw)))
	step := mag
	for _, m := range []float64{1, 2, 2.5, 5, 10} {
		if m*mag >= raw {
			step = m * mag
			break
		}
	}
	var ts []plot.Tick
	for v := math.Ceil(lo/step) * step; v <= hi+step*1e-9; v += step {
		if math.Abs(v) < step*1e-9 {
			v = 0
		}
		ts = append(ts, plot.Tick{Value: v, Label: tickLabel(v, step)})
	}
	return ts
}
