package main

import (
	"encoding/json"
	"math"
	"os"
	"testing"
)

// `vitals compare FLOAT QDQ --data ...` writes sqnr_db on NEW's matched layers
// within 0.1 dB of NumPy (testdata/quant/reference.json, written by
// testdata/gen/quant_models.py: SQNR = 10·log10(Σx²/Σ(x−x̂)²) dB over the
// whole sample), and `vitals check` of the bad-scale model puts relu2 first
// with clipped_fraction on its layer entry.
func TestQuantCompareAndCheckJSON(t *testing.T) {
	data := "../../testdata/ref/digits_sample_nchw.npy"
	var all map[string]json.RawMessage
	b, err := os.ReadFile("../../testdata/quant/reference.json")
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &all); err != nil {
		t.Fatal(err)
	}
	var bad struct {
		SQNR  map[string]float64 `json:"sqnr_db"`
		Quant map[string]struct {
			Clipped float64 `json:"clipped_fraction"`
		} `json:"quant"`
	}
	if err := json.Unmarshal(all["qdq_badscale"], &bad); err != nil {
		t.Fatal(err)
	}
	code, out, stderr := runCLI(t, "compare", "../../testdata/quant/fp32.onnx", "../../testdata/quant/qdq_badscale.onnx", "--data", data, "--format", "json")
	if code == 2 {
		t.Fatalf("compare: exit %d: %s", code, stderr)
	}
	var r struct {
		Compare struct {
			Layers []struct {
				Node   string   `json:"node"`
				SQNRdB *float64 `json:"sqnr_db"`
			} `json:"layers"`
		} `json:"compare"`
		Findings []struct {
			Check, Node string
		} `json:"findings"`
	}
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatal(err)
	}
	n := 0
	for _, l := range r.Compare.Layers {
		tensor := map[string]string{"bias": "output", "relu1_DequantizeLinear": "relu1_dequantized", "relu2_DequantizeLinear": "relu2_dequantized"}[l.Node]
		if tensor == "" {
			tensor = l.Node
		}
		want, ok := bad.SQNR[tensor]
		if !ok {
			continue
		}
		n++
		if l.SQNRdB == nil || math.Abs(*l.SQNRdB-want) > 0.1 {
			t.Errorf("%s: sqnr_db %v, NumPy %.3f", l.Node, l.SQNRdB, want)
		}
	}
	if n != len(bad.SQNR) {
		t.Errorf("%d layers with a NumPy SQNR in the compare JSON, want %d", n, len(bad.SQNR))
	}
	code, out, stderr = runCLI(t, "check", "../../testdata/quant/qdq_badscale.onnx", "--data", data, "--format", "json")
	if code != 1 {
		t.Fatalf("check: exit %d (want 1: an error finding): %s", code, stderr)
	}
	var c struct {
		Layers []struct {
			Output  string   `json:"output"`
			Clipped *float64 `json:"clipped_fraction"`
			Levels  *float64 `json:"levels_used_fraction"`
		} `json:"layers"`
		Ranking []struct{ Node string } `json:"ranking"`
	}
	if err := json.Unmarshal([]byte(out), &c); err != nil {
		t.Fatal(err)
	}
	if len(c.Ranking) == 0 || c.Ranking[0].Node != "relu2" {
		t.Errorf("ranking %v, want relu2 first", c.Ranking)
	}
	for _, l := range c.Layers {
		if l.Output == "relu2" && (l.Clipped == nil || l.Levels == nil || math.Abs(*l.Clipped-bad.Quant["relu2"].Clipped) > 1e-12) {
			t.Errorf("relu2: clipped_fraction %v levels_used_fraction %v", l.Clipped, l.Levels)
		}
	}
}
