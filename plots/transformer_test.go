package plots

import (
	"bytes"
	"image/png"
	"math"
	"testing"

	"github.com/vitals-health/vitals/report"
)

func tfReport() *report.Report {
	r := &report.Report{}
	for b, ent := range [][]float64{{0.9, 0.05}, {0.99, math.NaN()}} {
		l := report.Layer{Node: "sm" + itoa(b), Op: "Softmax"}
		l.Structure, l.Block, l.AttentionEntropy = "attention-probabilities", report.IntPtr(1-b), ent
		r.Layers = append(r.Layers, l)
	}
	for i, v := range []float64{5, 3000} {
		l := report.Layer{Node: "add" + itoa(i), Op: "Add"}
		l.Structure, l.ResidualIndex, l.MaxOverMedian = "residual-stream", report.IntPtr(1-i), report.Num(v)
		r.Layers = append(r.Layers, l)
	}
	return r
}

// The entropy heat map has one row per block in block order, one column per
// head, the fixed 0…1 scale, NaN cells blank; the residual chart has the
// ratios in stream order and the 1000× line of Sun et al. 2024.
func TestTransformerSpecs(t *testing.T) {
	h := AttentionEntropySpec(tfReport())
	if h == nil || len(h.Values) != 2 || len(h.Values[0]) != 2 || h.Min != 0 || h.Max != 1 {
		t.Fatalf("heat %+v", h)
	}
	if h.Values[0][0] != 0.99 || !math.IsNaN(h.Values[0][1]) || h.Values[1][1] != 0.05 || h.RowLabels[0] != "0 sm1" {
		t.Errorf("heat rows %v labels %v (want block 0 = sm1 first)", h.Values, h.RowLabels)
	}
	var buf bytes.Buffer
	if err := RenderHeat(&buf, h); err != nil {
		t.Fatal(err)
	}
	if img, err := png.Decode(&buf); err != nil || img.Bounds().Dx() != widthPx {
		t.Fatalf("png: %v", err)
	}
	c := ResidualRatioSpec(tfReport())
	if c == nil || len(c.Lines) != 1 || len(c.Lines[0].Points) != 2 || c.Lines[0].Points[0].Y != 3000 || !c.LogY || c.HLines[0].Y != 1000 {
		t.Fatalf("residual chart %+v", c)
	}
	if AttentionEntropySpec(&report.Report{}) != nil || ResidualRatioSpec(&report.Report{}) != nil {
		t.Error("specs without transformer layers should be nil")
	}
}
