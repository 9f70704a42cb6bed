package stats

import (
	"math"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

// Compare diffs the OLD checkpoint's statistics into the NEW one's report:
// it matches layers (by node name, then by position among layers of the same
// op type), records per-layer and per-weight changes and the output agreement,
// and the SQNR of each matched pair when newCol.SQNR is set, and runs
// CompareChecks: regressions (a check firing, or firing harder, in NEW than
// in OLD), frozen weights, weights that changed out of proportion and the
// layer where the SQNR drops most.
func Compare(oldCol, newCol *Collected, oldG, newG *loader.Graph, agree *report.Agreement) {
	nr, or := newCol.Report, oldCol.Report
	cmp := &report.Comparison{Old: or.Model.Path, New: nr.Model.Path, OldLayers: or.Layers, Agreement: agree,
		Layers: []report.LayerDelta{}, Weights: []report.WeightDelta{}, Unmatched: []string{}}
	match := matchLayers(or.Layers, nr.Layers)
	for i, l := range nr.Layers {
		j, ok := match[i]
		if !ok {
			cmp.Unmatched = append(cmp.Unmatched, "NEW "+l.Node+" ("+l.Op+")")
			continue
		}
		o := or.Layers[j]
		cmp.Layers = append(cmp.Layers, report.LayerDelta{Node: l.Node, OldNode: o.Node, Op: l.Op,
			MeanOld: o.Mean, MeanNew: l.Mean, StdOld: o.Std, StdNew: l.Std, DeadOld: o.DeadFraction, DeadNew: l.DeadFraction,
			SaturatedOld: o.SaturatedFraction, SaturatedNew: l.SaturatedFraction,
			HistogramDistance: report.Num(HistogramDistance(o.Histogram, l.Histogram))})
	}
	matchedOld := map[int]bool{}
	for _, j := range match {
		matchedOld[j] = true
	}
	for j, o := range or.Layers {
		if !matchedOld[j] {
			cmp.Unmatched = append(cmp.Unmatched, "OLD "+o.Node+" ("+o.Op+")")
		}
	}
	// weights: same initializer name with the same shape
	var changes []float64
	for _, w := range nr.Weights {
		nw, ok1 := constValue(newG, w.Name)
		ow, ok2 := constValue(oldG, w.Name)
		if !ok1 || !ok2 || !tensor.SameShape(nw.Shape, ow.Shape) || nw.DType != tensor.Float32 || ow.DType != tensor.Float32 {
			cmp.Unmatched = append(cmp.Unmatched, "weight "+w.Name)
			continue
		}
		rc := relChange(ow.F32(), nw.F32())
		cmp.Weights = append(cmp.Weights, report.WeightDelta{Name: w.Name, Node: w.Node, RelativeChange: report.Num(rc)})
		if !math.IsNaN(rc) {
			changes = append(changes, rc)
		}
	}
	nr.Compare = cmp
	if newCol.SQNR != nil {
		newCol.SQNR.applyLayers(nr)
	}
	compareFindings(oldCol, newCol, match, changes)
}

// relChange is ‖new − old‖₂ / ‖old‖₂.
func relChange(old, nw []float32) float64 {
	var d, n float64
	for i := range old {
		x := float64(nw[i]) - float64(old[i])
		d += x * x
		n += float64(old[i]) * float64(old[i])
	}
	if n == 0 {
		return math.NaN()
	}
	return math.Sqrt(d / n)
}

// matchLayers maps NEW layer index → OLD layer index: same node and output
// name first, then the k-th layer of an op type to the k-th of the same type.
func matchLayers(old, nw []report.Layer) map[int]int {
	m := map[int]int{}
	byName := map[string]int{}
	for j, l := range old {
		byName[l.Node+"\x00"+l.Output] = j
	}
	used := map[int]bool{}
	for i, l := range nw {
		if j, ok := byName[l.Node+"\x00"+l.Output]; ok && old[j].Op == l.Op {
			m[i] = j
			used[j] = true
		}
	}
	if len(m) == len(nw) {
		return m
	}
	pos := map[string][]int{}
	for j, l := range old {
		if !used[j] {
			pos[l.Op] = append(pos[l.Op], j)
		}
	}
	for i, l := range nw {
		if _, ok := m[i]; ok {
			continue
		}
		if q := pos[l.Op]; len(q) > 0 {
			m[i] = q[0]
			pos[l.Op] = q[1:]
		}
	}
	return m
}

// HistogramDistance is the total-variation distance ½Σ|p−q| between two
// histograms re-binned onto 64 equal bins over the union of their ranges (0..1).
func HistogramDistance(a, b *report.Histogram) float64 {
	if a == nil || b == nil || len(a.Edges) < 2 || len(b.Edges) < 2 {
		return math.NaN()
	}
	lo := math.Min(a.Edges[0], b.Edges[0])
	hi := math.Max(a.Edges[len(a.Edges)-1], b.Edges[len(b.Edges)-1])
	const bins = 64
	if hi <= lo {
		return 0
	}
	pa, pb := rebin(a, lo, hi, bins), rebin(b, lo, hi, bins)
	var tv float64
	for i := range pa {
		tv += math.Abs(pa[i] - pb[i])
	}
	return tv / 2
}

// rebin spreads each source bin's count uniformly over the target bins it overlaps, normalised to 1.
func rebin(h *report.Histogram, lo, hi float64, bins int) []float64 {
	out := make([]float64, bins)
	w := (hi - lo) / float64(bins)
	var total float64
	for i, c := range h.Counts {
		a, b := h.Edges[i], h.Edges[i+1]
		total += float64(c)
		if b <= a {
			k := min(bins-1, max(0, int((a-lo)/w)))
			out[k] += float64(c)
			continue
		}
		for k := max(0, int((a-lo)/w)); k < bins && lo+float64(k)*w < b; k++ {
			l, r := math.Max(a, lo+float64(k)*w), math.Min(b, lo+float64(k+1)*w)
			if r > l {
				out[k] += float64(c) * (r - l) / (b - a)
			}
		}
	}
	if total > 0 {
		for i := range out {
			out[i] /= total
		}
	}
	return out
}

// compareFindings runs CompareChecks over NEW's report with OLD as the
// baseline, with the thresholds NEW's run used, and re-ranks.
func compareFindings(oldCol, newCol *Collected, match map[int]int, changes []float64) {
	nr, or := newCol.Report, oldCol.Report
	newCol.Baseline = oldCol
	newCol.OldToNew = map[string]string{}
	for i, j := range match {
		newCol.OldToNew[or.Layers[j].Node] = nr.Layers[i].Node
	}
	newCol.WeightChanges = changes
	all := nr.Findings
	th := map[string]float64{}
	for _, c := range CompareChecks {
		for k, v := range c.Defaults {
			th[k] = v
		}
	}
	for k, v := range nr.Thresholds {
		th[k] = v
	}
	for _, c := range CompareChecks {
		p := &Pass{Collected: newCol, check: c, Thresholds: th, prior: &all}
		c.Run(p)
		all = append(all, p.findings...)
	}
	nr.Thresholds = th
	nr.Checks = append(nr.Checks, Docs(CompareChecks)...)
	nr.Ranking, nr.Findings = rank(nr, all)
}
