package plots

import (
	"testing"

	"github.com/vitals-health/vitals/report"
)

// The SQNR figure follows the matched layers in order, leaves out layers
// without an SQNR and marks the largest drop between neighbours (here the
// 22.9 dB fall from relu2 to flat of the bad-scale model in testdata/quant).
func TestSQNRSpecMarksLargestDrop(t *testing.T) {
	r := &report.Report{Compare: &report.Comparison{Layers: []report.LayerDelta{
		{Node: "conv1", SQNRdB: report.Num(30.7)}, {Node: "relu1", SQNRdB: report.Num(29.9)}, {Node: "x"},
		{Node: "relu2", SQNRdB: report.Num(28.5)}, {Node: "flat", SQNRdB: report.Num(5.6)}, {Node: "fc", SQNRdB: report.Num(5.0)},
	}}}
	c := SQNRSpec(r)
	if c == nil || c.File != "compare-sqnr.png" || len(c.Lines) != 1 || len(c.Lines[0].Points) != 5 {
		t.Fatalf("spec %+v", c)
	}
	if len(c.Markers) != 1 || c.Markers[0].Points[0].X != 3 || c.Markers[0].Points[0].Y != 5.6 {
		t.Errorf("largest drop marker %+v, want flat at x=3", c.Markers)
	}
	if SQNRSpec(&report.Report{Compare: &report.Comparison{Layers: []report.LayerDelta{{Node: "a"}}}}) != nil {
		t.Error("no SQNR: want no figure")
	}
}
