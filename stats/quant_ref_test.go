package stats_test

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/stats"
	"github.com/vitals-health/vitals/tensor"
)

const quantDir = "../testdata/quant"

// quantReference is testdata/quant/reference.json, written by
// testdata/gen/quant_models.py with NumPy over the whole digits sample.
type quantReference map[string]json.RawMessage

type quantModelRef struct {
	Quant map[string]struct {
		Scale              float64 `json:"scale"`
		ZeroPoint          float64 `json:"zero_point"`
		ClippedFraction    float64 `json:"clipped_fraction"`
		LevelsUsedFraction float64 `json:"levels_used_fraction"`
	} `json:"quant"`
	SQNR        map[string]float64 `json:"sqnr_db"`
	WeightDelta map[string]float64 `json:"weight_relative_change"`
}

func loadQuantRef(t *testing.T, model string) quantModelRef {
	t.Helper()
	var all quantReference
	b, err := os.ReadFile(filepath.Join(quantDir, "reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &all); err != nil {
		t.Fatal(err)
	}
	var r quantModelRef
	if err := json.Unmarshal(all[model], &r); err != nil {
		t.Fatal(err)
	}
	return r
}

// runSample runs a model over the whole digits sample in batches of 64 with
// the collector as hook; tap, when set, also sees every node output.
func runSample(t *testing.T, path string, tap func(n *loader.Node, outs []*tensor.Tensor)) *stats.Collected {
	t.Helper()
	return runSampleN(t, path, 0, tap)
}

// runSampleN is runSample over the first limit images (0: all).
func runSampleN(t *testing.T, path string, limit int, tap func(n *loader.Node, outs []*tensor.Tensor)) *stats.Collected {
	t.Helper()
	m, p := stats.LoadPlan(t, path)
	x, err := loader.ReadNpy("../testdata/ref/digits_sample_nchw.npy")
	if err != nil {
		t.Fatal(err)
	}
	c := stats.NewCollector(m, p)
	hook := func(n *loader.Node, outs []*tensor.Tensor) error {
		if tap != nil {
			tap(n, outs)
		}
		return c.Hook(n, outs)
	}
	per := x.Size() / x.Shape[0]
	total := x.Shape[0]
	if limit > 0 {
		total = min(total, limit)
	}
	for lo := 0; lo < total; lo += 64 {
		hi := min(lo+64, total)
		in := map[string]*tensor.Tensor{"input": tensor.From(append([]float32{}, x.F32()[lo*per:hi*per]...), append([]int{hi - lo}, x.Shape[1:]...)...)}
		c.AddInputs(in)
		outs, err := p.Run(in, hook)
		if err != nil {
			t.Fatal(err)
		}
		if err := c.Sync(); err != nil {
			t.Fatal(err)
		}
		c.AddOutputs(outs, nil)
		c.Samples += hi - lo
	}
	col := c.Finish("file")
	if err := stats.Run(col, stats.Checks, nil); err != nil {
		t.Fatal(err)
	}
	return col
}

// The clipped share, the share of integer levels used and the quantization
// parameters of each quantized activation agree with NumPy
// (testdata/gen/quant_models.py: clipped = round_half_even(v/scale)+zp outside
// [0, 255]; levels = distinct saturated values / 256, over all 512 images).
// The bad-scale model (relu2's scale ten times too small) gets the
// quant-range finding on relu2 at rank 1; the calibrated model gets none.
func TestQuantHealthAgainstNumPy(t *testing.T) {
	for _, name := range []string{"qdq", "qdq_badscale"} {
		ref := loadQuantRef(t, name)
		rep := runSample(t, filepath.Join(quantDir, name+".onnx"), nil).Report
		// counted by hand from quant_models.py: int8 weights 8·9 + 16·8·9 + 256·10 = 3784,
		// float biases 8+16+10, per-channel weight scales 8+16+10, three activation scales
		if rep.Model.Parameters != 3784+34+34+3 {
			t.Errorf("%s: %d parameters, want 3855 (int8 weights counted)", name, rep.Model.Parameters)
		}
		for tensorName, want := range ref.Quant {
			var clipped, levels *float64
			var q *report.Quantization
			if l := layerByOutput(rep, tensorName); l != nil {
				clipped, levels, q = l.ClippedFraction, l.LevelsUsedFraction, l.Quantization
			}
			for _, in := range rep.Input.PerInput {
				if in.Name == tensorName {
					clipped, levels, q = in.ClippedFraction, in.LevelsUsedFraction, in.Quantization
				}
			}
			if clipped == nil || levels == nil || q == nil {
				t.Errorf("%s %s: no quantization statistics", name, tensorName)
				continue
			}
			if math.Abs(*clipped-want.ClippedFraction) > 1e-12 || math.Abs(*levels-want.LevelsUsedFraction) > 1e-12 {
				t.Errorf("%s %s: clipped %g, levels used %g; NumPy %g, %g", name, tensorName, *clipped, *levels, want.ClippedFraction, want.LevelsUsedFraction)
			}
			if q.Granularity != "tensor" || q.Type != "uint8" || len(q.Scale) != 1 || float32(q.Scale[0]) != float32(want.Scale) || q.ZeroPoint[0] != want.ZeroPoint {
				t.Errorf("%s %s: parameters %+v, want uint8 per tensor scale %g zero point %g", name, tensorName, q, want.Scale, want.ZeroPoint)
			}
		}
		var quantFindings []report.Finding
		for _, f := range rep.Findings {
			if f.Check == "quant-range" {
				quantFindings = append(quantFindings, f)
			}
		}
		switch name {
		case "qdq":
			if len(quantFindings) != 0 {
				t.Errorf("calibrated model: quant-range findings %v", quantFindings)
			}
		case "qdq_badscale":
			if len(quantFindings) != 1 || quantFindings[0].Node != "relu2" || quantFindings[0].Severity != report.Error || len(rep.Ranking) == 0 || rep.Ranking[0].Node != "relu2" {
				t.Errorf("bad scale: want one quant-range error on relu2 ranked first, got %v, ranking %v", quantFindings, rep.Ranking)
			}
		}
	}
}

func layerByOutput(r *report.Report, out string) *report.Layer {
	for i := range r.Layers {
		if r.Layers[i].Output == out {
			return &r.Layers[i]
		}
	}
	return nil
}

// The integer outputs of the operator-oriented model's QLinearConv and
// QLinearMatMul nodes: levels used, the share at the ends of the range and
// the mean of the dequantized values, against ONNX Runtime's integer outputs
// for the same 64 images (testdata/quant/ort, written by quant_ort.js).
func TestQuantIntegerOutputsAgainstOnnxRuntime(t *testing.T) {
	rep := runSampleN(t, filepath.Join(quantDir, "qop.onnx"), 64, nil).Report
	for _, out := range []string{"relu1_quantized", "relu2_quantized", "fc_quantized"} {
		q, err := loader.ReadNpy(filepath.Join(quantDir, "ort", "qop."+out+".npy"))
		if err != nil {
			t.Fatal(err)
		}
		l := layerByOutput(rep, out)
		if l == nil || l.Quantization == nil || l.ClippedFraction == nil || l.LevelsUsedFraction == nil || l.Mean == nil {
			t.Fatalf("%s: no layer with quantization statistics", out)
		}
		qq := l.Quantization
		if qq.Measured != "integer output" || len(qq.Scale) != 1 {
			t.Fatalf("%s: %+v", out, qq)
		}
		seen := map[float64]bool{}
		ends, sum := 0, 0.0
		for i := 0; i < q.Size(); i++ {
			v := q.Float64At(i)
			seen[v] = true
			if v == 255 || v == 0 && qq.ZeroPoint[0] != 0 {
				ends++
			}
			sum += float64(float32(v-qq.ZeroPoint[0]) * float32(qq.Scale[0]))
		}
		n := float64(q.Size())
		if *l.LevelsUsedFraction != float64(len(seen))/256 || *l.ClippedFraction != float64(ends)/n {
			t.Errorf("%s: levels %g clipped %g; from ONNX Runtime's output %g, %g", out, *l.LevelsUsedFraction, *l.ClippedFraction, float64(len(seen))/256, float64(ends)/n)
		}
		if math.Abs(*l.Mean-sum/n) > 1e-6*math.Max(1, math.Abs(sum/n)) {
			t.Errorf("%s: mean of the dequantized values %g, from ONNX Runtime's output %g", out, *l.Mean, sum/n)
		}
		// QLinearConv with zero point 0 holds Relu(x): a channel is dead when
		// it never rises above the zero point
		if q.Rank() == 4 {
			ch, inner := q.Shape[1], q.Shape[2]*q.Shape[3]
			alive := make([]bool, ch)
			for i := 0; i < q.Size(); i++ {
				alive[(i/inner)%ch] = alive[(i/inner)%ch] || q.Float64At(i) > qq.ZeroPoint[0]
			}
			dead := 0
			for _, a := range alive {
				if !a {
					dead++
				}
			}
			if l.Activation != "relu" || l.DeadFraction == nil || *l.DeadFraction != float64(dead)/float64(ch) {
				t.Errorf("%s: activation %q dead %v; from ONNX Runtime's output %d of %d channels dead", out, l.Activation, report.Val(l.DeadFraction), dead, ch)
			}
		}
	}
}
