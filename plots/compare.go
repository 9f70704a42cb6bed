package plots

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"strings"

	"github.com/vitals-health/vitals/report"
)

// maxCompareLayers is how many of the most-changed layers get an overlay panel.
const maxCompareLayers = 16

// CompareSpec describes the comparison figures of a `vitals compare` report
// (nil when r.Compare is nil):
//
//   - compare-histograms-NN.png: for the layers that changed most (largest
//     histogram total-variation distance or dead/saturated fraction change,
//     at most 16), the OLD histogram (dashed) and the NEW one (solid)
//     overlaid as densities, so that different bin grids compare fairly;
//   - compare-depth-profile.png: the activation std of both runs along depth
//     (activation layers of the NEW model, or every matched layer when there
//     is none), log-scaled when it spans more than two decades.
func CompareSpec(r *report.Report) *Compare {
	if r.Compare == nil {
		return nil
	}
	old := map[string]*report.Layer{}
	for i := range r.Compare.OldLayers {
		old[r.Compare.OldLayers[i].Node] = &r.Compare.OldLayers[i]
	}
	return &Compare{Pages: comparePages(r, old), Depth: compareDepth(r)}
}

// changeScore is how much a matched layer changed: the largest of the
// histogram distance and the dead and saturated fraction changes.
func changeScore(d report.LayerDelta) float64 {
	s := 0.0
	if v, ok := val(d.HistogramDistance); ok {
		s = v
	}
	for _, pair := range [][2]*float64{{d.DeadOld, d.DeadNew}, {d.SaturatedOld, d.SaturatedNew}} {
		a, ok1 := val(pair[0])
		b, ok2 := val(pair[1])
		if ok1 && ok2 {
			s = math.Max(s, math.Abs(b-a))
		}
	}
	return s
}

var (
	oldStyle = Hist{Name: "OLD", Style: Dashed, Color: oldGrey}
	newStyle = Hist{Name: "NEW", Style: Solid, Color: newMagenta}
)

func comparePages(r *report.Report, old map[string]*report.Layer) []Page {
	deltas := slices.Clone(r.Compare.Layers)
	slices.SortStableFunc(deltas, func(a, b report.LayerDelta) int { return cmp.Compare(changeScore(b), changeScore(a)) })
	var panels []Panel
	var nodes []string
	for _, d := range deltas {
		if len(panels) == maxCompareLayers || changeScore(d) <= 0 {
			break
		}
		nl, ol := r.LayerByNode(d.Node), old[d.OldNode]
		if nl == nil || ol == nil {
			continue
		}
		hn, ok1 := finiteHist(nl.Histogram)
		ho, ok2 := finiteHist(ol.Histogram)
		if !ok1 || !ok2 {
			continue
		}
		panels = append(panels, comparePanel(d, density(ho, oldStyle), density(hn, newStyle)))
		nodes = append(nodes, d.Node)
	}
	for i, s := range shortNames(nodes, 30) {
		panels[i].Title = s + panels[i].Title[strings.IndexByte(panels[i].Title, '\n'):]
	}
	return paginate(panels, "compare-histograms",
		"OLD vs NEW activation histograms of the layers that changed most", []Hist{oldStyle, newStyle})
}

// density rescales counts to count/(total·bin width) and applies a style.
func density(h Hist, sty Hist) Hist {
	total := 0.0
	for _, c := range h.Counts {
		total += c
	}
	out := sty
	out.Edges = h.Edges
	out.Counts = make([]float64, len(h.Counts))
	for i, c := range h.Counts {
		out.Counts[i] = c / (total * (h.Edges[i+1] - h.Edges[i]))
	}
	return out
}

func comparePanel(d report.LayerDelta, ho, hn Hist) Panel {
	title := shortName(d.Node, 30) + "\n"
	if v, ok := val(d.HistogramDistance); ok {
		title += "TV distance " + fmt.Sprintf("%.2f", v)
	}
	if a, ok := val(d.DeadOld); ok {
		if b, ok := val(d.DeadNew); ok {
			title += fmt.Sprintf("  dead %.0f%% → %.0f%%", 100*a, 100*b)
		}
	}
	if a, ok := val(d.SaturatedOld); ok {
		if b, ok := val(d.SaturatedNew); ok {
			title += fmt.Sprintf("  sat. %.0f%% → %.0f%%", 100*a, 100*b)
		}
	}
	p := Panel{
		Node: d.Node, Title: title,
		XLabel: "activation value", YLabel: "density (per unit)",
		XMin:  math.Min(ho.Edges[0], hn.Edges[0]),
		XMax:  math.Max(ho.Edges[len(ho.Edges)-1], hn.Edges[len(hn.Edges)-1]),
		Hists: []Hist{ho, hn},
	}
	setCountRange(&p, ho, hn)
	if p.LogY {
		lo := math.Inf(1)
		for _, c := range append(slices.Clone(ho.Counts), hn.Counts...) {
			if c > 0 {
				lo = math.Min(lo, c)
			}
		}
		p.YMin = lo / 2
	}
	return p
}

func compareDepth(r *report.Report) *Chart {
	byNode := map[string]report.LayerDelta{}
	for _, d := range r.Compare.Layers {
		byNode[d.Node] = d
	}
	var nodes []string
	for _, l := range activationLayers(r) {
		if _, ok := byNode[l.Node]; ok {
			nodes = append(nodes, l.Node)
		}
	}
	if len(nodes) == 0 {
		for _, d := range r.Compare.Layers {
			nodes = append(nodes, d.Node)
		}
	}
	if len(nodes) == 0 {
		return nil
	}
	os := Series{Name: "OLD std", Style: Dashed, Color: oldGrey}
	ns := Series{Name: "NEW std", Style: Solid, Color: newMagenta}
	var ys []float64
	for i, n := range nodes {
		d := byNode[n]
		if v, ok := val(d.StdOld); ok {
			os.Points = append(os.Points, Point{float64(i), v})
			ys = append(ys, v)
		}
		if v, ok := val(d.StdNew); ok {
			ns.Points = append(ns.Points, Point{float64(i), v})
			ys = append(ys, v)
		}
	}
	if len(ys) == 0 {
		return nil
	}
	ticks, rot := nodeTicks(nodes)
	c := &Chart{
		File:   "compare-depth-profile.png",
		Title:  "Activation std along depth: OLD vs NEW checkpoint",
		XLabel: "layer (depth order)", YLabel: "std of activation",
		XMin: -0.5, XMax: float64(len(nodes)) - 0.5, Ticks: ticks, RotateTicks: rot,
	}
	lo, hi := minMax(ys)
	if decades(ys) > 2 && lo > 0 {
		c.LogY = true
		c.YLabel += " (log scale)"
		c.YMin, c.YMax = logRange(lo, hi)
	} else {
		c.YMin, c.YMax = 0, hi*1.1
		if hi <= 0 {
			c.YMax = 1
		}
	}
	os.Marks, os.Shape = true, Square
	ns.Marks, ns.Shape = true, Circle
	c.Lines = []Series{os, ns}
	return c
}
