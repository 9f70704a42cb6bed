package plots

import (
	"fmt"
	"math"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

func TestShortName(t *testing.T) {
	for in, want := range map[string]string{
		"/layer3/layer3.1/relu_1/Relu": "layer3.1/relu_1",
		"/features/conv1/Conv":         "features/conv1",
		"relu7":                        "relu7",
		"Relu":                         "Relu",
		"/a_very_long_scope_name/another_very_long_module_name/Conv": "…r_very_long_module_name",
	} {
		if got := shortName(in, 24); got != want {
			t.Errorf("shortName(%q) = %q, want %q", in, got, want)
		}
	}
	got := shortNames([]string{"/head/GlobalAveragePool", "/head/Flatten", "/head/fc2/Gemm"}, 30)
	if want := "head/GlobalAveragePool head/Flatten head/fc2"; strings.Join(got, " ") != want {
		t.Errorf("shortNames = %q, want %q", got, want)
	}
	// blocks that repeat their inner names (as torchvision's MobileNetV2
	// exports do) are told apart by the component that differs
	got = shortNames([]string{"/features/features.0/features.0.2/Clip", "/features/features.2/conv/conv.0/conv.0.2/Clip",
		"/features/features.13/conv/conv.0/conv.0.2/Clip", "/features/features.13/conv/conv.1/conv.1.2/Clip"}, 24)
	if want := "features.0/features.0.2|features.2/…/conv.0.2|features.13/…/conv.0.2|conv.1/conv.1.2"; strings.Join(got, "|") != want {
		t.Errorf("shortNames = %q, want %q", got, want)
	}
}

func TestDepthProfileSpecLinear(t *testing.T) {
	r := loadSample(t, "sample-check.json")
	c := DepthProfileSpec(r)
	if c == nil || c.LogY {
		t.Fatalf("want a linear depth profile, got %+v", c)
	}
	if !strings.Contains(c.Title, "mean ± std") || c.YLabel != "activation value" {
		t.Errorf("title %q, y label %q", c.Title, c.YLabel)
	}
	// Five activation layers: relu1, relu2, layer3.0 relu, layer3.1 relu_1, tanh.
	if len(c.Ticks) != 5 || c.Ticks[3].Label != "layer3.1/relu_1" || c.RotateTicks {
		t.Errorf("ticks %+v rotate %v", c.Ticks, c.RotateTicks)
	}
	if c.Band == nil || len(c.Band.Upper) != 5 {
		t.Fatalf("band %+v", c.Band)
	}
	l := r.LayerByNode("/head/tanh/Tanh")
	if got, want := c.Band.Upper[4].Y, *l.Mean+*l.Std; math.Abs(got-want) > 1e-12 {
		t.Errorf("band top of tanh = %v, want mean+std %v", got, want)
	}
	names := map[string]int{}
	for _, s := range c.Lines {
		names[s.Name] = len(s.Points)
	}
	if names["mean"] != 5 || names["1st percentile"] != 5 || names["99th percentile"] != 5 {
		t.Errorf("lines %v", names)
	}
	// layer3.0/relu has an error, layer3.1/relu_1 and tanh warnings: two marker shapes.
	if len(c.Markers) != 2 || c.Markers[0].Shape == c.Markers[1].Shape ||
		len(c.Markers[0].Points) != 1 || c.Markers[0].Points[0].X != 2 || len(c.Markers[1].Points) != 2 {
		t.Errorf("markers %+v", c.Markers)
	}
	if c.YMin >= -1 || c.YMax <= 2.9 {
		t.Errorf("y range [%v, %v] does not hold P01 -1 and P99 2.9", c.YMin, c.YMax)
	}
}

// syntheticReport has n ReLU layers whose std falls by a factor per layer,
// a NaN mean on one layer and no histograms.
func syntheticReport(n int, factor float64) *report.Report {
	r := &report.Report{}
	s := 1.0
	for i := range n {
		l := report.Layer{Node: fmt.Sprintf("/blocks/block%d/act/Relu", i), Op: "Relu", Depth: i,
			Mean: report.Num(s / 2), Std: report.Num(s), P01: report.Num(0), P99: report.Num(3 * s),
			DeadFraction: report.Num(0.1)}
		if i == 1 {
			l.Mean = report.Num(math.NaN())
		}
		r.Layers = append(r.Layers, l)
		s *= factor
	}
	return r
}

func TestDepthProfileSpecLogAndNaN(t *testing.T) {
	c := DepthProfileSpec(syntheticReport(6, 0.1)) // std from 1 to 1e-5: five decades
	if c == nil || !c.LogY || !strings.Contains(c.YLabel, "std") {
		t.Fatalf("want a log spread profile, got %+v", c)
	}
	if c.YMin > 1e-5 || c.YMax < 3 {
		t.Errorf("y range [%g, %g]", c.YMin, c.YMax)
	}
	for _, s := range c.Lines {
		for _, p := range s.Points {
			if p.Y <= 0 || !finite(p.Y) {
				t.Errorf("series %q has %v on a log axis", s.Name, p)
			}
		}
	}
	lin := DepthProfileSpec(syntheticReport(3, 0.5))
	if lin.LogY {
		t.Error("one decade should stay linear")
	}
	for _, s := range lin.Lines {
		if s.Name == "mean" && len(s.Points) != 2 {
			t.Errorf("NaN mean not filtered: %v", s.Points)
		}
	}
	if _, err := renderToBytes(lin); err != nil {
		t.Fatal(err)
	}
}

func TestManyLayersUseIndexTicks(t *testing.T) {
	c := DepthProfileSpec(syntheticReport(120, 0.97))
	if c.Ticks[0].Label != "0" || c.Ticks[1].Label != "" || c.RotateTicks {
		t.Errorf("120 layers: ticks %v…", c.Ticks[:3])
	}
	mid := DepthProfileSpec(syntheticReport(30, 0.97))
	if !mid.RotateTicks || mid.Ticks[0].Label != "block0/act" {
		t.Errorf("30 layers: rotate %v, ticks %v…", mid.RotateTicks, mid.Ticks[:2])
	}
}

func TestEmptyReportSpecs(t *testing.T) {
	r := &report.Report{Layers: []report.Layer{{Node: "x", Op: "Conv"}}}
	if DepthProfileSpec(r) != nil || UnitHealthSpec(r) != nil || WeightsSpec(r) != nil ||
		len(HistogramPagesSpec(r)) != 0 || CompareSpec(r) != nil {
		t.Error("empty report should give no figure specs")
	}
}

func TestUnitHealthSpec(t *testing.T) {
	c := UnitHealthSpec(loadSample(t, "sample-check.json"))
	if c.YMin != 0 || c.YMax != 1 || c.YLabel != "fraction of units" {
		t.Errorf("axis [%v,%v] %q", c.YMin, c.YMax, c.YLabel)
	}
	if len(c.Bars) != 2 || len(c.Bars[0].Points) != 4 || len(c.Bars[1].Points) != 1 {
		t.Fatalf("bars %+v", c.Bars)
	}
	if p := c.Bars[0].Points[2]; p.X != 2 || p.Y != 0.5625 {
		t.Errorf("dead bar of layer3.0/relu = %v", p)
	}
	// 0.25 and 0.2 warnings, and the two 0.5 errors merged into one line.
	var ys []float64
	for _, h := range c.HLines {
		ys = append(ys, h.Y)
	}
	if fmt.Sprint(ys) != "[0.25 0.2 0.5]" || !strings.Contains(c.HLines[2].Name, "dead-units & saturation error") {
		t.Errorf("threshold lines %+v", c.HLines)
	}
	r := syntheticReport(2, 1)
	r.Thresholds = map[string]float64{"dead-units.error": 0.4}
	if hl := UnitHealthSpec(r).HLines; len(hl) != 4 || hl[2].Y != 0.4 || hl[3].Y != 0.5 {
		t.Errorf("configured thresholds: %+v", hl)
	}
}

func TestHistogramPagesSpec(t *testing.T) {
	r := loadSample(t, "sample-check.json")
	pages := HistogramPagesSpec(r)
	if len(pages) != 1 || pages[0].File != "histograms-01.png" || len(pages[0].Panels) != 16 || pages[0].Rows != 4 {
		t.Fatalf("pages %d, first %+v", len(pages), pages[0].File)
	}
	ps := pages[0].Panels
	// Ranking order first, then depth order.
	for i, n := range []string{"/layer3/layer3.0/relu/Relu", "/head/fc1|proj/Gemm", "/layer3/layer3.1/relu_1/Relu", "/head/tanh/Tanh",
		"/layer3/layer3.1/conv/Conv", "/head/softmax/Softmax", "/features/conv1/Conv"} {
		if ps[i].Node != n {
			t.Errorf("panel %d is %s, want %s", i, ps[i].Node, n)
		}
	}
	if !strings.HasPrefix(ps[0].Title, "layer3.0/relu\n") || !strings.Contains(ps[0].Title, "dead 56%") {
		t.Errorf("title %q", ps[0].Title)
	}
	if !strings.Contains(ps[1].Title, "3 non-finite") {
		t.Errorf("non-finite count missing: %q", ps[1].Title)
	}
	if !ps[0].LogY || ps[1].LogY {
		t.Errorf("ReLU spike should use a log count axis, the Gaussian not (%v, %v)", ps[0].LogY, ps[1].LogY)
	}
	l := r.LayerByNode("/head/fc1|proj/Gemm")
	if ps[1].XMin < l.Histogram.Edges[0] || ps[1].XMax > l.Histogram.Edges[40] || ps[1].XLabel != "activation value" {
		t.Errorf("x range [%v,%v]", ps[1].XMin, ps[1].XMax)
	}

	// 20 layers with histograms (one with NaN/Inf edges and counts) → 2 pages.
	big := syntheticReport(20, 0.9)
	for i := range big.Layers {
		big.Layers[i].Histogram = &report.Histogram{Edges: []float64{0, 1, 2, 3}, Counts: []int64{5, 3, 1}}
	}
	big.Layers[3].Histogram = &report.Histogram{Edges: []float64{math.Inf(-1), 0, 1, math.NaN()}, Counts: []int64{2, 7, 1}}
	big.Layers[5].Histogram = nil
	pages = HistogramPagesSpec(big)
	if len(pages) != 2 || len(pages[1].Panels) != 3 || pages[1].Rows != 1 || pages[1].File != "histograms-02.png" ||
		!strings.Contains(pages[1].Title, "page 2 of 2") {
		t.Fatalf("%d pages, last %+v", len(pages), pages[len(pages)-1])
	}
	h := pages[0].Panels[3].Hists[0]
	if fmt.Sprint(h.Edges, h.Counts) != "[0 1] [7]" {
		t.Errorf("non-finite bins kept: %v %v", h.Edges, h.Counts)
	}
}

func TestWeightsSpec(t *testing.T) {
	c := WeightsSpec(loadSample(t, "sample-check.json"))
	if c.LogY || len(c.Lines) != 1 || len(c.Lines[0].Points) != 6 {
		t.Fatalf("%+v", c)
	}
	if len(c.HLines) != 2 || c.HLines[0].Y != 1 || c.HLines[1].Y != math.Sqrt2 ||
		!strings.Contains(c.HLines[0].Name, "Xavier") || !strings.Contains(c.HLines[1].Name, "He") {
		t.Errorf("reference lines %+v", c.HLines)
	}
	r := &report.Report{Weights: []report.Weight{{Name: "a", Gain: report.Num(0.001)}, {Name: "b", Gain: report.Num(1.3)}, {Name: "c"}}}
	if c := WeightsSpec(r); !c.LogY || len(c.Lines[0].Points) != 2 || c.YMin > 0.001 {
		t.Errorf("three decades should give a log axis: %+v", c)
	}
}

func TestCompareSpec(t *testing.T) {
	r := loadSample(t, "sample-compare.json")
	c := CompareSpec(r)
	if c == nil || len(c.Pages) != 1 || c.Pages[0].File != "compare-histograms-01.png" {
		t.Fatalf("%+v", c)
	}
	p := c.Pages[0].Panels[0]
	if p.Node != "/layer3/layer3.1/relu_1/Relu" || len(p.Hists) != 2 || p.Hists[0].Name != "OLD" || p.Hists[1].Name != "NEW" ||
		p.Hists[0].Style == p.Hists[1].Style {
		t.Errorf("first panel %s %+v", p.Node, p.Hists)
	}
	if !strings.Contains(p.Title, "dead 6% → 31%") {
		t.Errorf("title %q", p.Title)
	}
	// Densities integrate to one.
	for _, h := range p.Hists {
		area := 0.0
		for i, d := range h.Counts {
			area += d * (h.Edges[i+1] - h.Edges[i])
		}
		if math.Abs(area-1) > 1e-9 {
			t.Errorf("%s density integrates to %v", h.Name, area)
		}
	}
	d := c.Depth
	if d.File != "compare-depth-profile.png" || len(d.Lines) != 2 || len(d.Lines[0].Points) != 5 || d.Lines[0].Style == d.Lines[1].Style {
		t.Errorf("depth %+v", d)
	}
}
