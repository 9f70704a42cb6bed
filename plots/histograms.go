package plots

import (
	"fmt"
	"math"
	"slices"
	"strings"

	"github.com/vitals-health/vitals/report"
)

const (
	gridCols = 4
	gridRows = 4
)

// HistogramPagesSpec describes histograms-01.png, histograms-02.png, …: a
// 4×4 grid per page of the activation histogram of every layer that has one,
// worst-ranked layers first (r.Ranking order, then the others in depth
// order). Each panel is titled with the shortened node name and the layer's
// mean, std and dead (or saturated) percentage; NaN/Inf values are never in a
// histogram, their number is added to the title. A panel whose tallest bin
// dwarfs the others (a ReLU's spike at zero) gets a log count axis.
func HistogramPagesSpec(r *report.Report) []Page {
	var panels []Panel
	layers := rankedLayers(r)
	names := make([]string, len(layers))
	for i, l := range layers {
		names[i] = l.Node
	}
	short := shortNames(names, 30)
	for i, l := range layers {
		if p, ok := histPanel(l, short[i]); ok {
			panels = append(panels, p)
		}
	}
	return paginate(panels, "histograms", "Activation histograms per layer, worst-ranked first", nil)
}

// rankedLayers orders the layers by r.Ranking, then the rest by depth.
func rankedLayers(r *report.Report) []*report.Layer {
	seen := map[string]bool{}
	var out []*report.Layer
	for _, rk := range r.Ranking {
		if l := r.LayerByNode(rk.Node); l != nil && !seen[l.Node] {
			seen[l.Node] = true
			out = append(out, l)
		}
	}
	var rest []*report.Layer
	for i := range r.Layers {
		if !seen[r.Layers[i].Node] {
			rest = append(rest, &r.Layers[i])
		}
	}
	slices.SortStableFunc(rest, func(a, b *report.Layer) int { return a.Depth - b.Depth })
	return append(out, rest...)
}

// histPanel builds the panel of one layer; false when it has no drawable histogram.
func histPanel(l *report.Layer, name string) (Panel, bool) {
	h, ok := finiteHist(l.Histogram)
	if !ok {
		return Panel{}, false
	}
	h.Style, h.Color, h.Fill = Solid, histFill, true
	p := Panel{
		Node: l.Node, Title: name + "\n" + panelStats(l),
		XLabel: "activation value", YLabel: "count",
		XMin: h.Edges[0], XMax: h.Edges[len(h.Edges)-1],
		Hists: []Hist{h},
	}
	setCountRange(&p, h)
	return p, true
}

// spiky reports whether one bin dwarfs all others (more than 8 times the
// second-tallest), as the zero bin of a ReLU output does.
func spiky(counts []float64) bool {
	s := slices.Clone(counts)
	slices.Sort(s)
	return len(s) > 1 && s[len(s)-2] > 0 && s[len(s)-1] > 8*s[len(s)-2]
}

// setCountRange chooses a log count axis (floor 0.7 count) when a histogram
// is spiky, else a linear one from 0.
func setCountRange(p *Panel, hs ...Hist) {
	top, log := 0.0, false
	for _, h := range hs {
		log = log || spiky(h.Counts)
		for _, c := range h.Counts {
			top = math.Max(top, c)
		}
	}
	if log {
		p.LogY = true
		p.YLabel += " (log)"
		p.YMin, p.YMax = 0.7, top*2.5
		return
	}
	p.YMin, p.YMax = 0, top*1.08
	if top <= 0 {
		p.YMax = 1
	}
}

// finiteHist copies a histogram, dropping bins with non-finite edges or counts
// and trimming empty bins at both ends so the x range shows the data.
func finiteHist(h *report.Histogram) (Hist, bool) {
	if h == nil || len(h.Edges) < 2 || len(h.Counts) != len(h.Edges)-1 {
		return Hist{}, false
	}
	var out Hist
	for i, c := range h.Counts {
		a, b := h.Edges[i], h.Edges[i+1]
		if !finite(a) || !finite(b) || b <= a || c < 0 {
			continue
		}
		if len(out.Edges) > 0 && out.Edges[len(out.Edges)-1] != a {
			// A gap: keep the outline closed with an empty bin.
			out.Counts = append(out.Counts, 0)
			out.Edges = append(out.Edges, a)
		}
		if len(out.Edges) == 0 {
			out.Edges = append(out.Edges, a)
		}
		out.Edges = append(out.Edges, b)
		out.Counts = append(out.Counts, float64(c))
	}
	lo, hi := 0, len(out.Counts)
	for lo < hi && out.Counts[lo] == 0 {
		lo++
	}
	for hi > lo && out.Counts[hi-1] == 0 {
		hi--
	}
	if lo == hi {
		return Hist{}, false
	}
	out.Counts = out.Counts[lo:hi]
	out.Edges = out.Edges[lo : hi+1]
	return out, true
}

// panelStats is "mean … std … dead …%[  N non-finite]".
func panelStats(l *report.Layer) string {
	var parts []string
	if m, ok := val(l.Mean); ok {
		parts = append(parts, "mean "+num(m))
	}
	if s, ok := val(l.Std); ok {
		parts = append(parts, "std "+num(s))
	}
	if d, ok := val(l.DeadFraction); ok {
		parts = append(parts, fmt.Sprintf("dead %.0f%%", 100*d))
	}
	if s, ok := val(l.SaturatedFraction); ok {
		parts = append(parts, fmt.Sprintf("sat. %.0f%%", 100*s))
	}
	if l.Nonfinite > 0 {
		parts = append(parts, fmt.Sprintf("%d non-finite", l.Nonfinite))
	}
	return strings.Join(parts, "  ")
}

// num formats a statistic with 3 significant digits.
func num(x float64) string {
	return fmt.Sprintf("%.3g", x)
}

// paginate cuts panels into numbered 4×4 pages named prefix-NN.png.
func paginate(panels []Panel, prefix, title string, legend []Hist) []Page {
	per := gridCols * gridRows
	n := (len(panels) + per - 1) / per
	var pages []Page
	for i := 0; i < n; i++ {
		ps := panels[i*per : min(len(panels), (i+1)*per)]
		t := title
		if n > 1 {
			t = fmt.Sprintf("%s (page %d of %d)", title, i+1, n)
		}
		pages = append(pages, Page{
			File: fmt.Sprintf("%s-%02d.png", prefix, i+1), Title: t,
			Cols: gridCols, Rows: (len(ps) + gridCols - 1) / gridCols,
			Panels: ps, Legend: legend,
		})
	}
	return pages
}
