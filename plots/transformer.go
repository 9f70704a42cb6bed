package plots

import (
	"fmt"
	"io"
	"math"
	"sort"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"github.com/vitals-health/vitals/report"
)

// Heat is the specification of a heat map: Values[row][col] in [Min, Max]
// (NaN cells are left blank), one labelled row per block.
type Heat struct {
	File           string
	Title          string
	XLabel, YLabel string
	RowLabels      []string
	Values         [][]float64
	Min, Max       float64
	Note           string
}

// AttentionEntropySpec describes attention-entropy.png: the mean normalised
// attention entropy H/ln K of every head (columns) of every attention block
// (rows, block 0 at the top), on a fixed 0 (one-hot) … 1 (uniform) scale. It
// returns nil when the report has no attention-probability layer.
func AttentionEntropySpec(r *report.Report) *Heat {
	type blk struct {
		b    int
		node string
		ent  []float64
	}
	var bs []blk
	heads := 0
	for _, l := range r.Layers {
		if (l.Structure == "attention-probabilities" || l.Structure == "attention (fused)") && l.Block != nil && len(l.AttentionEntropy) > 0 {
			bs = append(bs, blk{*l.Block, l.Node, l.AttentionEntropy})
			heads = max(heads, len(l.AttentionEntropy))
		}
	}
	if len(bs) == 0 {
		return nil
	}
	sort.Slice(bs, func(i, j int) bool { return bs[i].b < bs[j].b })
	h := &Heat{File: "attention-entropy.png", Title: "Attention entropy per head: H/ln K (dark 0 = one-hot, pale 1 = uniform)",
		XLabel: "head", YLabel: "attention block", Min: 0, Max: 1}
	for _, b := range bs {
		row := make([]float64, heads)
		for i := range row {
			row[i] = math.NaN()
			if i < len(b.ent) && !math.IsNaN(b.ent[i]) && !math.IsInf(b.ent[i], 0) {
				row[i] = b.ent[i]
			}
		}
		h.RowLabels = append(h.RowLabels, fmt.Sprintf("%d %s", b.b, shortNode(b.node)))
		h.Values = append(h.Values, row)
	}
	h.Note = "collapse below 0.2 (attention-collapse, Zhai et al. 2023); uniform above 0.99 (attention-uniform)"
	return h
}

// ResidualRatioSpec describes residual-stream.png: max |x| / median |x| of
// every residual-stream tensor in stream order (log scale), with the
// massive-activation ratio 1000 (Sun et al. 2024) as a reference line. It
// returns nil when no residual tensor has a finite ratio.
func ResidualRatioSpec(r *report.Report) *Chart {
	type pt struct {
		i    int
		node string
		v    float64
	}
	var ps []pt
	for _, l := range r.Layers {
		if l.Structure != "residual-stream" || l.ResidualIndex == nil {
			continue
		}
		if v, ok := val(l.MaxOverMedian); ok && v > 0 {
			ps = append(ps, pt{*l.ResidualIndex, l.Node, v})
		}
	}
	if len(ps) == 0 {
		return nil
	}
	sort.Slice(ps, func(a, b int) bool { return ps[a].i < ps[b].i })
	s := Series{Name: "max |x| / median |x|", Color: inkNavy, Shape: Circle, Marks: true}
	var names []string
	ys := []float64{1000}
	for k, p := range ps {
		s.Points = append(s.Points, Point{float64(k), p.v})
		names = append(names, p.node)
		ys = append(ys, p.v)
	}
	ticks, rot := nodeTicks(names)
	lo, hi := minMax(ys)
	c := &Chart{File: "residual-stream.png", Title: "Residual stream: max |x| / median |x| along depth",
		XLabel: "residual-stream tensor (depth order)", YLabel: "max |x| / median |x| (log scale)",
		XMin: -0.5, XMax: float64(len(ps)) - 0.5, Ticks: ticks, RotateTicks: rot, LogY: true,
		Lines:  []Series{s},
		HLines: []HLine{{Name: "massive: 1000× (Sun et al. 2024)", Y: 1000, Style: Dashed, Color: errorRed}}}
	c.YMin, c.YMax = logRange(math.Max(lo, 1e-3), hi)
	return c
}

// heatGrid adapts a Heat to plotter.GridXYZ (row 0 drawn at the top).
type heatGrid struct{ h *Heat }

func (g heatGrid) Dims() (int, int) { return len(g.h.Values[0]), len(g.h.Values) }
func (g heatGrid) Z(c, r int) float64 {
	return g.h.Values[len(g.h.Values)-1-r][c]
}
func (g heatGrid) X(c int) float64 { return float64(c) }
func (g heatGrid) Y(r int) float64 { return float64(r) }
func (g heatGrid) Min() float64    { return g.h.Min }
func (g heatGrid) Max() float64    { return g.h.Max }

// RenderHeat draws a heat map specification as a 1200×720 PNG with the
// value of each cell written in it.
func RenderHeat(w io.Writer, h *Heat) error {
	if len(h.Values) == 0 || len(h.Values[0]) == 0 {
		return fmt.Errorf("heat map %s has no cells", h.File)
	}
	p := plot.New()
	styleAxes(p, h.Title, h.XLabel, h.YLabel, 15, 13, 11)
	hm := plotter.NewHeatMap(heatGrid{h}, ramp{from: inkNavy, to: paleTint, n: 64})
	hm.Min, hm.Max = h.Min, h.Max
	hm.NaN = white
	p.Add(hm)
	cols, rows := heatGrid{h}.Dims()
	var xys plotter.XYs
	var labels []string
	var dark []bool // the cell's fill is in the dark half of the ramp
	for r := 0; r < rows; r++ {
		for c := 0; c < cols; c++ {
			if v := h.Values[r][c]; !math.IsNaN(v) {
				xys = append(xys, plotter.XY{X: float64(c), Y: float64(rows - 1 - r)})
				labels = append(labels, fmt.Sprintf("%.3f", v))
				dark = append(dark, (v-h.Min) < 0.5*(h.Max-h.Min))
			}
		}
	}
	if len(xys) > 0 && cols*rows <= 400 {
		lb, err := plotter.NewLabels(plotter.XYLabels{XYs: xys, Labels: labels})
		if err != nil {
			return err
		}
		for i := range lb.TextStyle {
			lb.TextStyle[i] = sans(10)
			lb.TextStyle[i].XAlign, lb.TextStyle[i].YAlign = draw.XCenter, draw.YCenter
			if dark[i] {
				lb.TextStyle[i].Color = white
			}
		}
		p.Add(lb)
	}
	var xt, yt []plot.Tick
	for c := 0; c < cols; c++ {
		xt = append(xt, plot.Tick{Value: float64(c), Label: itoa(c)})
	}
	for r := 0; r < rows; r++ {
		yt = append(yt, plot.Tick{Value: float64(rows - 1 - r), Label: h.RowLabels[r]})
	}
	p.X.Tick.Marker = plot.ConstantTicks(xt)
	p.Y.Tick.Marker = plot.ConstantTicks(yt)
	p.X.Min, p.X.Max = -0.5, float64(cols)-0.5
	p.Y.Min, p.Y.Max = -0.5, float64(rows)-0.5
	return writePNG(w, widthPx, chartHeightPx, func(dc draw.Canvas) error {
		area := dc
		if h.Note != "" {
			area.Min.Y += px(noteHeightPx)
			st := sans(11)
			st.XAlign, st.YAlign = draw.XLeft, draw.YBottom
			dc.FillText(st, vg.Point{X: dc.Min.X + px(12), Y: dc.Min.Y + px(6)}, h.Note)
		}
		p.Draw(area)
		return nil
	})
}

// shortNode keeps the last 28 characters of a node name.
func shortNode(s string) string {
	if r := []rune(s); len(r) > 28 {
		return "…" + string(r[len(r)-27:])
	}
	return s
}
