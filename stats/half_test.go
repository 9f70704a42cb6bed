package stats_test

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// The float16 model of testdata/quant: which tensors are float16, and the
// shares beyond 65504 (boost) and below the smallest normal float16 (tiny)
// against NumPy (testdata/gen/quant_models.py, float32 forward with float16
// weights; float16 limits from IEEE 754 binary16: max 65504, min normal 2⁻¹⁴).
// The shares may differ by a value or two where float32 sums are taken in
// another order.
func TestFloat16RangeAgainstNumPy(t *testing.T) {
	var all map[string]json.RawMessage
	b, err := os.ReadFile(filepath.Join(quantDir, "reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &all); err != nil {
		t.Fatal(err)
	}
	var ref struct {
		Boost struct {
			Over float64 `json:"float16_overflow_fraction"`
		} `json:"boost"`
		Tiny struct {
			Sub float64 `json:"float16_subnormal_fraction"`
		} `json:"tiny"`
	}
	if err := json.Unmarshal(all["fp16"], &ref); err != nil {
		t.Fatal(err)
	}
	rep := runSample(t, filepath.Join(quantDir, "fp16.onnx"), nil).Report
	if len(rep.Model.Float16Weights) != 8 {
		t.Errorf("float16 weights %v, want the 8 initializers", rep.Model.Float16Weights)
	}
	for _, l := range rep.Layers {
		if want := l.Node != "to_float"; l.Float16 != want {
			t.Errorf("%s: float16 %v, want %v", l.Node, l.Float16, want)
		}
	}
	boost, tiny := layerByOutput(rep, "boost"), layerByOutput(rep, "tiny")
	if boost == nil || tiny == nil || boost.Float16OverflowFraction == nil || tiny.Float16SubnormalFraction == nil {
		t.Fatal("no float16 statistics on boost and tiny")
	}
	tol := 2 / float64(boost.Count)
	if math.Abs(*boost.Float16OverflowFraction-ref.Boost.Over) > tol || math.Abs(*tiny.Float16SubnormalFraction-ref.Tiny.Sub) > tol {
		t.Errorf("overflow %g (NumPy %g), subnormal %g (NumPy %g)", *boost.Float16OverflowFraction, ref.Boost.Over, *tiny.Float16SubnormalFraction, ref.Tiny.Sub)
	}
	want := map[string]report.Severity{"boost": report.Error, "tiny": report.Warning}
	for _, f := range rep.Findings {
		if f.Check != "float16-range" || f.Severity == report.Info {
			continue
		}
		if want[f.Node] != f.Severity {
			t.Errorf("unexpected %s on %s: %s", f.Severity, f.Node, f.Message)
		}
		delete(want, f.Node)
	}
	if len(want) > 0 {
		t.Errorf("missing float16-range findings: %v", want)
	}
}
