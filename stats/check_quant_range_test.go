package stats

import (
	"testing"

	"github.com/vitals-health/vitals/report"
)

// quant-range grades the clipped share against its thresholds (1% warning,
// 5% error, common practice) and warns on few levels used (under 10%); a
// tensor without quantization statistics is not judged.
func TestQuantRangeThresholds(t *testing.T) {
	q := &report.Quantization{Node: "q", Op: "QuantizeLinear", Type: "uint8", Granularity: "tensor", Scale: []float64{0.1}, ZeroPoint: []float64{0}, Levels: 256}
	mk := func(clipped, levels float64) *Collected {
		l := report.Layer{Node: "act", Output: "act", Op: "Relu", Count: 1000, ClippedFraction: report.Num(clipped), LevelsUsedFraction: report.Num(levels), Quantization: q}
		plain := report.Layer{Node: "plain", Output: "plain", Op: "Relu", Count: 1000}
		return &Collected{Report: &report.Report{Layers: []report.Layer{l, plain}}}
	}
	for _, tc := range []struct {
		clipped, levels float64
		want            report.Severity
	}{
		{0.001, 0.5, ""}, {0.02, 0.5, report.Warning}, {0.2, 0.5, report.Error}, {0, 0.05, report.Warning}, {0, 0.2, ""},
	} {
		fs := checkOn(t, quantRangeCheck, mk(tc.clipped, tc.levels), nil)
		switch {
		case tc.want == "" && len(fs) != 0:
			t.Errorf("clipped %g levels %g: unexpected %v", tc.clipped, tc.levels, fs)
		case tc.want != "" && (len(fs) != 1 || fs[0].Severity != tc.want || fs[0].Node != "act"):
			t.Errorf("clipped %g levels %g: want one %s on act, got %v", tc.clipped, tc.levels, tc.want, fs)
		}
	}
	if fs := checkOn(t, quantRangeCheck, mk(0.02, 0.5), map[string]float64{"quant-range.clipped_warning": 0.03}); len(fs) != 0 {
		t.Errorf("override: %v", fs)
	}
}
