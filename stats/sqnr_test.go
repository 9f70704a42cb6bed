package stats_test

import (
	"math"
	"path/filepath"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/stats"
)

// compareQuant runs the float model and a quantized one over the digits
// sample as `vitals compare` does and returns NEW's report with the SQNR applied.
func compareQuant(t *testing.T, newName string) *report.Report {
	t.Helper()
	return compareQuantCapped(t, newName, 0)
}

// compareQuantCapped is compareQuant keeping at most keep bytes of OLD's tensors (0: the default).
func compareQuantCapped(t *testing.T, newName string, keep int64) *report.Report {
	t.Helper()
	load := func(name string) (*loader.Model, *probe.Plan) {
		return stats.LoadPlan(t, filepath.Join(quantDir, name+".onnx"))
	}
	om, op := load("fp32")
	nm, np := load(newName)
	if !stats.WantSQNR(om.Graph, nm.Graph) {
		t.Fatalf("%s: float against quantized not recognised", newName)
	}
	s := stats.NewSQNR(om.Graph, nm.Graph, op, np)
	if keep > 0 {
		s.SetKeepLimit(keep)
	}
	oldCol := runSample(t, filepath.Join(quantDir, "fp32.onnx"), s.TapOld)
	newCol := runSample(t, filepath.Join(quantDir, newName+".onnx"), s.TapNew)
	newCol.SQNR = s
	stats.Compare(oldCol, newCol, om.Graph, nm.Graph, nil)
	return newCol.Report
}

// SQNR per matched layer, float model against the QDQ models, agrees with
// NumPy's (testdata/gen/quant_models.py; the standard definition
// SQNR = 10·log10(Σx²/Σ(x−x̂)²) dB over all 512 images) within 0.1 dB, and
// the finding names the mis-scaled quantizer of relu2 (its DequantizeLinear,
// paired with the float relu2) as the place where the SQNR drops most.
func TestSQNRAgainstNumPy(t *testing.T) {
	for _, name := range []string{"qdq", "qdq_badscale"} {
		ref := loadQuantRef(t, name)
		rep := compareQuant(t, name)
		got := map[string]report.LayerDelta{}
		for _, d := range rep.Compare.Layers {
			got[d.Node] = d
		}
		// NumPy names tensors; the QDQ graph's nodes are named after them except the bias Add
		node := map[string]string{"output": "bias", "relu1_dequantized": "relu1_DequantizeLinear", "relu2_dequantized": "relu2_DequantizeLinear"}
		how := map[string]string{"relu1_dequantized": "quantizer", "relu2_dequantized": "quantizer"}
		for tensorName, want := range ref.SQNR {
			n := tensorName
			if v, ok := node[n]; ok {
				n = v
			}
			d, ok := got[n]
			if !ok || d.SQNRdB == nil {
				t.Errorf("%s %s: no sqnr_db", name, n)
				continue
			}
			wantHow := "name"
			if h, ok := how[tensorName]; ok {
				wantHow = h
			}
			if math.Abs(*d.SQNRdB-want) > 0.1 || d.SQNRMatch != wantHow {
				t.Errorf("%s %s: SQNR %.4f dB (%s), NumPy %.4f dB", name, n, *d.SQNRdB, d.SQNRMatch, want)
			}
		}
		// QDQ weights (int8 through DequantizeLinear) are folded to the values
		// the model computes with: their change from the float weights is the
		// weight quantization error, ‖W_q − W‖/‖W‖ (NumPy, same reference file)
		for _, w := range rep.Compare.Weights {
			want, ok := ref.WeightDelta[w.Name]
			if !ok || w.RelativeChange == nil || math.Abs(*w.RelativeChange-want) > 1e-6*want {
				t.Errorf("%s weight %s: relative change %v, NumPy %g", name, w.Name, report.Val(w.RelativeChange), want)
			}
		}
		if len(rep.Compare.Weights) != len(ref.WeightDelta) {
			t.Errorf("%s: %d weights compared, want %d", name, len(rep.Compare.Weights), len(ref.WeightDelta))
		}
		var noise *report.Finding
		for i, f := range rep.Findings {
			if f.Check == "quant-noise" {
				noise = &rep.Findings[i]
			}
		}
		if noise == nil {
			t.Fatalf("%s: no quant-noise finding", name)
		}
		if name == "qdq_badscale" && (noise.Node != "relu2_DequantizeLinear" || noise.Severity != report.Warning || !strings.Contains(noise.Message, "relu2_QuantizeLinear")) {
			t.Errorf("bad scale: the drop is at relu2's quantizer; got %s %s: %s", noise.Severity, noise.Node, noise.Message)
		}
		if name == "qdq" && noise.Severity != report.Info {
			t.Errorf("calibrated: no drop of a bit or more expected, got %s: %s", noise.Severity, noise.Message)
		}
	}
}

// Where the quantized graph renames its tensors (operator-oriented QLinearConv
// outputs, dequantized here), the linear layers pair up by order: both
// QLinearConv nodes of qop.onnx (Relu folded into a zero point of 0) are
// compared with the float model's Relu outputs; the QDQ reference puts those
// layers near 29 dB, so the operator-oriented SQNR must be in that region
// (within 3 dB: its bias is rounded to int32 and its rounding differs).
func TestSQNRMatchesByOrder(t *testing.T) {
	rep := compareQuant(t, "qop")
	ref := loadQuantRef(t, "qdq")
	want := map[string]string{"conv1_quant": "relu1", "conv2_quant": "relu2"}
	found := 0
	for _, d := range rep.Compare.Layers {
		old, ok := want[d.Node]
		if !ok {
			continue
		}
		found++
		if d.OldNode != old || d.SQNRMatch != "order" || d.SQNRdB == nil || math.Abs(*d.SQNRdB-ref.SQNR[old]) > 3 {
			t.Errorf("%s: paired with %s by %q, SQNR %v; want %s by order near %.1f dB", d.Node, d.OldNode, d.SQNRMatch, report.Val(d.SQNRdB), old, ref.SQNR[old])
		}
	}
	if found != 2 {
		t.Errorf("want both QLinearConv nodes paired, found %d: %+v", found, rep.Compare.Layers)
	}
	for _, u := range rep.Compare.Unmatched {
		if u == "OLD relu1 (Relu)" || u == "OLD relu2 (Relu)" {
			t.Errorf("%s is paired but still listed as unmatched", u)
		}
	}
}

// With the memory for OLD's tensors capped, the SQNR covers the batches kept
// and the finding says over how many of the batches.
func TestSQNRCappedKeepSaysSo(t *testing.T) {
	rep := compareQuantCapped(t, "qdq", 3*64*8*8*8*4) // room for a few batches of relu1 and its neighbours
	for _, f := range rep.Findings {
		if f.Check == "quant-noise" {
			if f.Evidence["batches"] == nil || !strings.Contains(f.Message, "batches") {
				t.Errorf("capped: %s %v", f.Message, f.Evidence)
			}
			return
		}
	}
	t.Error("no quant-noise finding")
}
