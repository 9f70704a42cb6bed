package main

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

const (
	demoBad  = "../../testdata/demo/spindle-overdriven.onnx"
	demoGood = "../../testdata/demo/spindle-healthy.onnx"
	demoData = "../../testdata/demo/readings.npy"
	demoLab  = "../../testdata/demo/conditions.npy"
)

func runCLI(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	code := run(args, &out, &errb)
	return code, out.String(), errb.String()
}

// The JSON output follows the contract of docs/design.md: every key present with
// the right JSON type; unknown values are null, never made up.
func TestJSONContract(t *testing.T) {
	code, out, stderr := runCLI(t, "check", demoBad, "--data", demoData, "--labels", demoLab, "--format", "json")
	if code != 1 {
		t.Fatalf("exit %d, want 1 (errors present); stderr %s", code, stderr)
	}
	var doc map[string]any
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatalf("not JSON: %v", err)
	}
	type kind int
	const (
		str kind = iota
		num
		arr
		obj
		numOrNull
		objOrNull
	)
	check := func(where string, m map[string]any, keys map[string]kind) {
		t.Helper()
		for k, want := range keys {
			v, ok := m[k]
			if !ok {
				t.Errorf("%s: key %q missing", where, k)
				continue
			}
			okType := false
			switch want {
			case str:
				_, okType = v.(string)
			case num:
				_, okType = v.(float64)
			case arr:
				_, okType = v.([]any)
			case obj:
				_, okType = v.(map[string]any)
			case numOrNull:
				_, isNum := v.(float64)
				okType = isNum || v == nil
			case objOrNull:
				_, isObj := v.(map[string]any)
				okType = isObj || v == nil
			}
			if !okType {
				t.Errorf("%s: key %q has %T", where, k, v)
			}
		}
	}
	check("top", doc, map[string]kind{"tool": str, "version": str, "model": obj, "input": obj, "layers": arr, "weights": arr, "findings": arr, "ranking": arr})
	if doc["tool"] != "vitals" {
		t.Errorf("tool = %v", doc["tool"])
	}
	check("model", doc["model"].(map[string]any), map[string]kind{"path": str, "opset": num, "producer": str, "nodes": num, "parameters": num})
	in := doc["input"].(map[string]any)
	check("input", in, map[string]kind{"source": str, "samples": num, "per_input": arr})
	if in["source"] != "file" || in["samples"] != 2000.0 {
		t.Errorf("input = %v", in)
	}
	for _, pi := range in["per_input"].([]any) {
		check("per_input", pi.(map[string]any), map[string]kind{"name": str, "shape": arr, "mean": numOrNull, "std": numOrNull})
	}
	layers := doc["layers"].([]any)
	if len(layers) != 7 {
		t.Fatalf("%d layers, want 7 (Gemm/Relu ×3 + output Gemm)", len(layers))
	}
	for _, l := range layers {
		lm := l.(map[string]any)
		check("layer", lm, map[string]kind{"node": str, "op": str, "output": str, "depth": num, "shape": arr, "count": num,
			"mean": numOrNull, "std": numOrNull, "min": numOrNull, "max": numOrNull, "zero_fraction": numOrNull, "nonfinite": num,
			"units": numOrNull, "dead_fraction": numOrNull, "saturated_fraction": numOrNull, "histogram": objOrNull})
		if lm["op"] == "Gemm" && lm["dead_fraction"] != nil {
			t.Errorf("Gemm layer %v has a dead fraction; unknown values must be null", lm["node"])
		}
		if h, ok := lm["histogram"].(map[string]any); ok {
			e, c := h["edges"].([]any), h["counts"].([]any)
			var sum float64
			for _, v := range c {
				sum += v.(float64)
			}
			if len(e) != len(c)+1 || sum != lm["count"].(float64)-lm["nonfinite"].(float64) {
				t.Errorf("layer %v: histogram %d edges / %d counts summing to %v, count %v", lm["node"], len(e), len(c), sum, lm["count"])
			}
		}
	}
	for _, w := range doc["weights"].([]any) {
		check("weight", w.(map[string]any), map[string]kind{"name": str, "node": str, "shape": arr, "fan_in": num, "fan_out": num, "std": numOrNull,
			"scale_vs_he": numOrNull, "scale_vs_xavier": numOrNull, "identical_rows": num, "zero_rows": num, "nonfinite": num})
	}
	findings := doc["findings"].([]any)
	for _, f := range findings {
		check("finding", f.(map[string]any), map[string]kind{"check": str, "severity": str, "node": str, "message": str, "evidence": obj})
	}
	ranking := doc["ranking"].([]any)
	for _, r := range ranking {
		check("ranking", r.(map[string]any), map[string]kind{"node": str, "score": num, "checks": arr})
	}
	// findings are ordered by ranking
	pos := map[string]int{}
	for i, r := range ranking {
		pos[r.(map[string]any)["node"].(string)] = i
	}
	last := -1
	for _, f := range findings {
		n := f.(map[string]any)["node"].(string)
		p, ok := pos[n]
		if !ok {
			p = len(ranking)
		}
		if p < last {
			t.Fatalf("findings not in ranking order at %q", n)
		}
		last = p
	}
	// the demo's over-driven checkpoint: dead units on relu2 and relu3, the top two ranks
	if len(ranking) < 2 || !strings.Contains(out, `"check": "dead-units"`) {
		t.Fatalf("want dead-units findings on top: %v", ranking)
	}
}

// The healthy checkpoint has no finding at error level and exits 0; with
// --fail-on warning the exit code follows warnings.
func TestExitCodes(t *testing.T) {
	if code, out, _ := runCLI(t, "check", demoGood, "--data", demoData); code != 0 || !strings.Contains(out, "No findings at warning level") {
		t.Fatalf("healthy demo: exit %d\n%s", code, out)
	}
	if code, _, _ := runCLI(t, "check", demoBad, "--data", demoData, "--fail-on", "error"); code != 1 {
		t.Fatalf("over-driven demo: exit %d, want 1", code)
	}
	if code, _, _ := runCLI(t, "check"); code != 2 {
		t.Fatalf("no model: exit %d, want 2", code)
	}
}

// Bad input: a clear message naming the file, input or node, and exit code 2.
func TestInputErrors(t *testing.T) {
	dir := t.TempDir()
	notModel := filepath.Join(dir, "notes.onnx")
	os.WriteFile(notModel, []byte("this is not a protobuf model \xff\xff\xff"), 0o644)
	code, _, stderr := runCLI(t, "check", notModel)
	if code != 2 || !strings.Contains(stderr, "notes.onnx") {
		t.Errorf("not a model: exit %d, %q", code, stderr)
	}
	// unsupported operators are listed one line per type with a node name
	b := modelbuild.New("odd", 13)
	b.Input("x", []int{1, 4}, true)
	b.Node("FancyOp", "first_fancy", []string{"x"}, []string{"y"})
	b.Node("OtherOp", "second_odd", []string{"y"}, []string{"z"})
	b.Output("z")
	odd := filepath.Join(dir, "odd.onnx")
	if err := b.Write(odd); err != nil {
		t.Fatal(err)
	}
	code, _, stderr = runCLI(t, "check", odd)
	if code != 2 || !strings.Contains(stderr, `FancyOp (domain ai.onnx, opset 13): 1 node "first_fancy"`) || !strings.Contains(stderr, `OtherOp (domain ai.onnx, opset 13): 1 node "second_odd"`) {
		t.Errorf("unsupported ops: exit %d, %q", code, stderr)
	}
	// a sample of the wrong shape names the input and both shapes
	wrong := filepath.Join(dir, "wrong.npy")
	f, _ := os.Create(wrong)
	loader.WriteNpy(f, tensor.New(tensor.Float32, []int{5, 7}))
	f.Close()
	code, _, stderr = runCLI(t, "check", demoBad, "--data", wrong)
	if code != 2 || !strings.Contains(stderr, `input "input"`) || !strings.Contains(stderr, "[N 24]") && !strings.Contains(stderr, "24]") || !strings.Contains(stderr, "[7]") {
		t.Errorf("wrong shape: exit %d, %q", code, stderr)
	}
	// --data naming an input the model does not have
	code, _, stderr = runCLI(t, "check", demoBad, "--data", "nosuch="+demoData)
	if code != 2 || !strings.Contains(stderr, `"nosuch"`) {
		t.Errorf("unknown input: exit %d, %q", code, stderr)
	}
}

// Without --data the report says first that it describes noise.
func TestSyntheticFirstLine(t *testing.T) {
	code, out, stderr := runCLI(t, "check", demoGood, "--samples", "40")
	if code == 2 {
		t.Fatal(stderr)
	}
	if !strings.HasPrefix(out, "NOTE: no --data given") || !strings.Contains(strings.SplitN(out, "\n", 2)[0], "noise") {
		t.Fatalf("first line: %q", strings.SplitN(out, "\n", 2)[0])
	}
}

// compare names the layers whose units died, once each, marked new against
// OLD (no second "regression" line repeating them), and writes the overlay plots.
func TestCompareDemo(t *testing.T) {
	dir := t.TempDir()
	code, out, stderr := runCLI(t, "compare", demoGood, demoBad, "--data", demoData, "--out", dir, "--format", "json")
	if code != 1 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var doc struct {
		Findings []struct {
			Check, Node, Severity string
			Evidence              map[string]any
		}
		Compare struct {
			Layers []struct {
				Node    string
				DeadOld *float64 `json:"dead_old"`
				DeadNew *float64 `json:"dead_new"`
			}
		}
	}
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatal(err)
	}
	regressed := map[string]bool{}
	for _, f := range doc.Findings {
		if f.Check == "dead-units" && f.Severity == "error" && f.Evidence["compare"] == "new" {
			if regressed[f.Node] {
				t.Errorf("%s reported twice", f.Node)
			}
			regressed[f.Node] = true
		}
		if f.Check == "regression" && (f.Node == "/relu2/Relu" || f.Node == "/relu3/Relu") {
			t.Errorf("a second line for the same problem: %+v", f)
		}
	}
	if !regressed["/relu2/Relu"] || !regressed["/relu3/Relu"] {
		t.Fatalf("regressions %v, want /relu2/Relu and /relu3/Relu", regressed)
	}
	for _, name := range []string{"compare-histograms-01.png", "compare-depth-profile.png", "report.json"} {
		if _, err := os.Stat(filepath.Join(dir, name)); err != nil {
			t.Errorf("missing %s: %v", name, err)
		}
	}
}
