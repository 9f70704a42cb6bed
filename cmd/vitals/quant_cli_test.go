package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
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

// quant-noise is a compare check with its threshold in --config: the
// mis-scaled quantizer of relu2 (testdata/gen/quant_models.py) drops the SQNR
// by more than one bit (6.02 dB per bit, the standard quantization-noise
// relation) at relu2_DequantizeLinear, a warning by default; with
// quant-noise.drop_db raised above that drop the same finding is information
// and its evidence carries the threshold in force; a misspelt name is exit 2.
func TestQuantNoiseThresholdFromConfig(t *testing.T) {
	data := "../../testdata/ref/digits_sample_nchw.npy"
	noise := func(cfg string) (sev string, ev map[string]any) {
		t.Helper()
		args := []string{"compare", "../../testdata/quant/fp32.onnx", "../../testdata/quant/qdq_badscale.onnx", "--data", data, "--format", "json"}
		if cfg != "" {
			path := filepath.Join(t.TempDir(), "th.yaml")
			if err := os.WriteFile(path, []byte(cfg), 0o644); err != nil {
				t.Fatal(err)
			}
			args = append(args, "--config", path)
		}
		code, out, stderr := runCLI(t, args...)
		if code == 2 {
			t.Fatalf("compare %q: exit 2: %s", cfg, stderr)
		}
		var r struct {
			Findings []struct {
				Check, Node, Severity string
				Evidence              map[string]any
			} `json:"findings"`
		}
		if err := json.Unmarshal([]byte(out), &r); err != nil {
			t.Fatal(err)
		}
		for _, f := range r.Findings {
			if f.Check == "quant-noise" {
				if f.Node != "relu2_DequantizeLinear" {
					t.Errorf("quant-noise on %s, want relu2_DequantizeLinear", f.Node)
				}
				return f.Severity, f.Evidence
			}
		}
		t.Fatalf("compare %q: no quant-noise finding", cfg)
		return "", nil
	}
	sev, ev := noise("")
	drop, _ := ev["drop_db"].(float64)
	if sev != "warning" || drop < 6.02 || ev["drop_warning_db"] != 6.02 {
		t.Fatalf("default: %s, drop %v dB, threshold %v; want a warning past 6.02 dB", sev, ev["drop_db"], ev["drop_warning_db"])
	}
	limit := math.Ceil(drop + 1)
	sev, ev = noise(fmt.Sprintf("quant-noise.drop_db: %g\n", limit))
	if sev != "info" || ev["drop_warning_db"] != limit {
		t.Errorf("drop_db %g (above the %.1f dB drop): %s, threshold %v; want information", limit, drop, sev, ev["drop_warning_db"])
	}
	path := filepath.Join(t.TempDir(), "bad.yaml")
	if err := os.WriteFile(path, []byte("quant-noise.drop: 3\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if code, _, stderr := runCLI(t, "compare", "../../testdata/quant/fp32.onnx", "../../testdata/quant/qdq_badscale.onnx", "--data", data, "--config", path); code != 2 || !strings.Contains(stderr, "quant-noise.drop_db") {
		t.Errorf("misspelt quant-noise threshold: exit %d, %q; want 2 naming quant-noise.drop_db among the known", code, stderr)
	}
}
