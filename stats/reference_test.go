package stats_test

// Reference tests: vitals' executor and statistics against numbers produced
// outside this project. Every model, input, output and golden statistic under
// testdata/ref was written by testdata/gen/*.py with PyTorch 1.13 (Debian
// python3-torch): the outputs are torch's eager forward pass, the golden layer
// statistics come from torch forward hooks on the eager modules (float64
// accumulation over the float32 tensors), see testdata/gen/README.md. Nothing
// here is computed by vitals' own code on the reference side.

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sync"
	"testing"

	"github.com/vitals-health/vitals/check"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
)

const refDir = "../testdata/ref"

// refIndex mirrors testdata/ref/index.json (only the fields the tests read).
type refIndex struct {
	Models []refModel `json:"models"`
}

type refModel struct {
	Name         string `json:"name"`
	Kind         string `json:"kind"` // "reference" or "pathology"
	Architecture string `json:"architecture"`
	Opset        int64  `json:"opset"`
	Files        struct {
		Model  string `json:"model"`
		Input  string `json:"input"`
		Output string `json:"output"`
		Golden string `json:"golden"`
		Labels string `json:"labels"`
	} `json:"files"`
	InputName string `json:"input_name"`
	Pathology *struct {
		Check     *string            `json:"check"`
		Node      *string            `json:"node"`
		AlsoNodes []string           `json:"also_nodes"`
		Value     json.RawMessage    `json:"value"`
		PerNode   map[string]float64 `json:"per_node"`
	} `json:"pathology"`
}

// goldenLayer is one hooked torch module's output statistics.
type goldenLayer struct {
	Module       string   `json:"module"`
	ModuleType   string   `json:"module_type"`
	OnnxNode     string   `json:"onnx_node"`
	OnnxOutput   string   `json:"onnx_output"`
	Op           string   `json:"op"`
	Shape        []int    `json:"shape"`
	Count        int64    `json:"count"`
	Mean         float64  `json:"mean"`
	Std          float64  `json:"std"`
	Min          float64  `json:"min"`
	Max          float64  `json:"max"`
	UnitAxis     int      `json:"unit_axis"`
	Units        *int     `json:"units"`
	DeadFraction *float64 `json:"dead_fraction"`
	SatFraction  *float64 `json:"saturated_fraction"`
}

type golden struct {
	Opset  int64         `json:"opset"`
	Layers []goldenLayer `json:"layers"`
}

// Tolerances. Output: |got−want| ≤ atol + rtol·|want| elementwise.
const (
	outRtol = 1e-4
	outAtol = 1e-5
	// Layer statistics (float64 accumulation on both sides, so the only
	// differences are the float32 activations themselves).
	statRel = 1e-3 // mean and std, relative
	// A mean near zero is a cancellation of positive and negative values; its
	// error scales with the layer's spread, not with the mean itself. Floor:
	// statRel·std (i.e. 0.1% of the layer's standard deviation).
	minmaxRel = 1e-4 // min and max, relative to the layer's largest magnitude max(|min|,|max|)
)

// outputAtol is the absolute output tolerance of a model: outAtol, raised to
// outAtol·max|want| when the outputs are large. A logit of a few units in a
// row whose logits reach hundreds (mlp_dead reaches ~677: its lr-5e-2 training
// blew the weights up) is the difference of partial sums of that size; float32
// rounding of those partial sums (ε≈6e-8 per step, summed in a different order
// than torch's BLAS) gives an absolute error proportional to the magnitude of
// the sums, which a pure relative tolerance on the small result cannot absorb.
func outputAtol(want []float32) float64 {
	m := 0.0
	for _, v := range want {
		m = math.Max(m, math.Abs(float64(v)))
	}
	return outAtol * math.Max(1, m)
}

// refResult is what vitals produced for one model, compared with the reference.
type refResult struct {
	model    refModel
	err      error // load/compile/run failure
	rep      *report.Report
	golden   golden
	outDiff  float64 // worst |got−want| − (atol+rtol·|want|), ≤ 0 when within tolerance
	outWorst float64 // worst |got−want|
	outAtol  float64
	outNeed  float64  // smallest atol that would pass with rtol outRtol
	margin   float64  // worst (deviation / tolerance) over all compared layer statistics
	problems []string // every mismatch, one line each
	layers   int      // golden layers compared
	badLay   int      // golden layers with at least one mismatch
}

func (r *refResult) fail(format string, args ...any) {
	r.problems = append(r.problems, fmt.Sprintf(format, args...))
}

// refBatch is the batch size for the 512-sample pathology data: the CLI's
// default, so statistics are merged over 16 batches exactly as `vitals check` does.
const refBatch = 32

var (
	refOnce    sync.Once
	refResults []*refResult
	refIdxErr  error
)

// allResults runs every model of index.json once per test binary.
func allResults(t *testing.T) []*refResult {
	t.Helper()
	refOnce.Do(func() {
		var idx refIndex
		b, err := os.ReadFile(filepath.Join(refDir, "index.json"))
		if err == nil {
			err = json.Unmarshal(b, &idx)
		}
		if err != nil {
			refIdxErr = err
			return
		}
		for _, m := range idx.Models {
			refResults = append(refResults, evalRef(m))
		}
	})
	if refIdxErr != nil {
		t.Fatal(refIdxErr)
	}
	if len(refResults) == 0 {
		t.Fatal("no models in index.json")
	}
	return refResults
}

// evalRef loads, compiles and runs one model through check.Check (the
// numbers tested are the ones `vitals check` reports, activation storage
// recycled as it does) and compares output and
// golden layers. It records mismatches instead of failing, so the reference table (docs/reference-models.md)
// and the per-model tests share one evaluation.
func evalRef(m refModel) *refResult {
	r := &refResult{model: m}
	if b, err := os.ReadFile(filepath.Join(refDir, m.Files.Golden)); err != nil {
		r.err = err
		return r
	} else if err := json.Unmarshal(b, &r.golden); err != nil {
		r.err = fmt.Errorf("%s: %w", m.Files.Golden, err)
		return r
	}
	mod, err := check.Load(filepath.Join(refDir, m.Files.Model), check.LoadOptions{})
	if err != nil {
		r.err = err
		return r
	}
	want, err := loader.ReadNpy(filepath.Join(refDir, m.Files.Output))
	if err != nil {
		r.err = err
		return r
	}
	// the path `vitals check` runs (package check): batches of refBatch,
	// activation storage recycled within and between batches; the final
	// output of every batch is kept for the comparison with torch's
	sample := check.Sample{Data: []string{m.InputName + "=" + filepath.Join(refDir, m.Files.Input)}, Batch: refBatch}
	if m.Files.Labels != "" {
		sample.Labels = filepath.Join(refDir, m.Files.Labels)
	}
	outName := mod.Outputs()[0].Name
	var got []float32
	keep := func(outs map[string]*tensor.Tensor, _ int) error {
		o := outs[outName]
		if o == nil {
			return fmt.Errorf("no output %q", outName)
		}
		f, ok := o.Data.([]float32)
		if !ok {
			return fmt.Errorf("output %q is %v, want float32", outName, o.DType)
		}
		got = append(got, f...)
		return nil
	}
	rep, err := check.Check(context.Background(), mod, sample, check.Options{Outputs: keep})
	if err != nil {
		r.err = err
		return r
	}
	r.rep = rep

	// final output against torch 1.13's eager forward pass (<name>.output.npy)
	w := want.F32()
	if len(got) != len(w) {
		r.fail("output has %d values, torch's has %d", len(got), len(w))
	} else {
		r.outAtol = outputAtol(w)
		r.outDiff = math.Inf(-1)
		for i := range w {
			d := math.Abs(float64(got[i]) - float64(w[i]))
			r.outWorst = math.Max(r.outWorst, d)
			r.outDiff = math.Max(r.outDiff, d-(r.outAtol+outRtol*math.Abs(float64(w[i]))))
			r.outNeed = math.Max(r.outNeed, d-outRtol*math.Abs(float64(w[i])))
		}
		if r.outDiff > 0 || math.IsNaN(r.outDiff) {
			r.fail("output: worst |Δ| %.3g exceeds atol %.3g + rtol %.0e·|want|", r.outWorst, r.outAtol, outRtol)
		}
	}
	// every golden layer
	for _, g := range r.golden.Layers {
		r.layers++
		before := len(r.problems)
		compareLayer(r, g)
		if len(r.problems) > before {
			r.badLay++
		}
	}
	return r
}

// vitalsLayer finds the vitals layer for a golden entry: same node and output tensor.
func vitalsLayer(rep *report.Report, g goldenLayer) *report.Layer {
	for i := range rep.Layers {
		l := &rep.Layers[i]
		if l.Node == g.OnnxNode && l.Output == g.OnnxOutput {
			return l
		}
	}
	return nil
}

// reluFamily are the ops for which vitals reports a dead fraction, and
// smoothModules the torch modules of smooth ReLU-like units whose dead
// fraction ("never > 0", the golden files' dead_definition) vitals reports
// too: SiLU exported as Mul(x, Sigmoid(x)), GELU exported in erf form ending
// in a Mul, and Hardswish. Where torch fills dead_fraction for one of these,
// vitals must report the same fraction.
var (
	reluFamily    = map[string]bool{"Relu": true, "LeakyRelu": true, "PRelu": true, "Clip": true}
	smoothModules = map[string]bool{"SiLU": true, "GELU": true, "Hardswish": true, "Mish": true, "ELU": true, "CELU": true, "SELU": true}
)

func compareLayer(r *refResult, g goldenLayer) {
	id := fmt.Sprintf("%s (%s %s)", g.OnnxNode, g.ModuleType, g.Module)
	l := vitalsLayer(r.rep, g)
	if l == nil {
		r.fail("%s: vitals has no layer for output %q", id, g.OnnxOutput)
		return
	}
	if l.Op != g.Op {
		r.fail("%s: op %s, torch export says %s", id, l.Op, g.Op)
	}
	if l.Count != g.Count {
		r.fail("%s: count %d, torch %d", id, l.Count, g.Count)
	}
	// vitals keeps the first batch's shape; golden has the whole sample's
	if len(l.Shape) != len(g.Shape) || !slices.Equal(l.Shape[1:], g.Shape[1:]) || l.Shape[0] != min(g.Shape[0], refBatch) {
		r.fail("%s: shape %v, torch %v (first batch of %d)", id, l.Shape, g.Shape, refBatch)
	}
	if l.Mean == nil || l.Std == nil || l.Min == nil || l.Max == nil {
		r.fail("%s: vitals reports null moments", id)
		return
	}
	// Moments: torch 1.13 forward hooks, float64 accumulation over the float32
	// tensor, population std (ddof=0) — the same definitions vitals reports.
	tolMean := statRel*math.Abs(g.Mean) + statRel*g.Std
	tolStd := statRel * g.Std
	scale := math.Max(math.Abs(g.Min), math.Abs(g.Max))
	tolMM := minmaxRel * scale
	for _, dt := range [][2]float64{{*l.Mean - g.Mean, tolMean}, {*l.Std - g.Std, tolStd}, {*l.Min - g.Min, tolMM}, {*l.Max - g.Max, tolMM}} {
		if dt[1] > 0 {
			r.margin = math.Max(r.margin, math.Abs(dt[0])/dt[1])
		}
	}
	if d := math.Abs(*l.Mean - g.Mean); d > tolMean {
		r.fail("%s: mean %.7g, torch %.7g (|Δ| %.3g > %.0e·(|mean|+std))", id, *l.Mean, g.Mean, d, statRel)
	}
	if d := math.Abs(*l.Std - g.Std); d > tolStd || (g.Std == 0 && *l.Std != 0) {
		r.fail("%s: std %.7g, torch %.7g (rel %.3g > %.0e)", id, *l.Std, g.Std, d/g.Std, statRel)
	}
	if d := math.Abs(*l.Min - g.Min); d > tolMM {
		r.fail("%s: min %.7g, torch %.7g (|Δ| %.3g > %.0e·%.3g)", id, *l.Min, g.Min, d, minmaxRel, scale)
	}
	if d := math.Abs(*l.Max - g.Max); d > tolMM {
		r.fail("%s: max %.7g, torch %.7g (|Δ| %.3g > %.0e·%.3g)", id, *l.Max, g.Max, d, minmaxRel, scale)
	}
	// Dead units: a count over units, so exact. Source: torch 1.13 forward
	// hooks, "never > 0 over all samples and positions" along unit_axis.
	if (reluFamily[g.Op] || smoothModules[g.ModuleType]) && g.DeadFraction != nil {
		if l.DeadFraction == nil {
			r.fail("%s: torch has dead fraction %.4g, vitals reports none", id, *g.DeadFraction)
		} else {
			if *l.DeadFraction != *g.DeadFraction && math.Abs(*l.DeadFraction-*g.DeadFraction) > 1e-12 {
				r.fail("%s: dead fraction %.6g, torch %.6g", id, *l.DeadFraction, *g.DeadFraction)
			}
			wantAxis := g.UnitAxis
			if wantAxis < 0 {
				wantAxis += len(g.Shape)
			}
			if l.UnitAxis == nil || *l.UnitAxis != wantAxis {
				r.fail("%s: unit axis %v, torch %d", id, l.UnitAxis, wantAxis)
			}
			if g.Units != nil && (l.Units == nil || *l.Units != *g.Units) {
				r.fail("%s: units %v, torch %d", id, l.Units, *g.Units)
			}
		}
	}
	// Saturation: share of elements, exact count. Source: torch 1.13 forward
	// hooks with the same rule (tanh |y|>0.99; sigmoid y<0.01 or y>0.99).
	if g.SatFraction != nil {
		if l.SaturatedFraction == nil {
			r.fail("%s: torch has saturated fraction %.4g, vitals reports none", id, *g.SatFraction)
		} else if math.Abs(*l.SaturatedFraction-*g.SatFraction) > 1e-12 {
			r.fail("%s: saturated fraction %.8g, torch %.8g (%d vs %d elements)", id, *l.SaturatedFraction, *g.SatFraction,
				int64(math.Round(*l.SaturatedFraction*float64(l.Count))), int64(math.Round(*g.SatFraction*float64(g.Count))))
		}
	}
}

// TestReferenceArchitectures: nine architectures exported by torch 1.13
// (residual, mobile/HardSwish, depthwise-separable SiLU, DenseNet-style, VGG
// with unfused BatchNorm, tiny ViT, LSTM, GRU, 1-D conv; opsets 11/13/17).
// Reference implementation: torch 1.13 eager forward and forward hooks.
//
// The runs recycle activation storage within a batch as vitals check does,
// so a value whose storage were reused while still needed would show here
// (that the CNNs' runs do recycle some is checked in package check,
// TestRunRecyclesWithinBatch).
func TestReferenceArchitectures(t *testing.T) {
	for _, r := range allResults(t) {
		if r.model.Kind != "reference" {
			continue
		}
		t.Run(r.model.Name, func(t *testing.T) {
			checkResult(t, r)
		})
	}
}

func checkResult(t *testing.T, r *refResult) {
	t.Helper()
	if r.err != nil {
		t.Fatalf("does not run: %v", r.err)
	}
	if r.rep.Model.Opset != r.model.Opset || r.golden.Opset != r.model.Opset {
		t.Errorf("opset: vitals reads %d, index says %d, golden %d", r.rep.Model.Opset, r.model.Opset, r.golden.Opset)
	}
	if r.layers == 0 {
		t.Error("golden file lists no layers")
	}
	for _, p := range r.problems {
		t.Error(p)
	}
	t.Logf("output worst |Δ| %.3g (atol %.3g, needed %.3g, rtol %.0e); %d golden layers, %d mismatched, worst statistic at %.2g of its tolerance",
		r.outWorst, r.outAtol, r.outNeed, outRtol, r.layers, r.badLay, r.margin)
}

// TestReferencePathologies: six models trained on the UCI "Optical Recognition
// of Handwritten Digits" data set (Alpaydin & Kaynak 1998, scikit-learn's
// bundled copy), 512 held-out images. Each carries one pathology whose check
// and node index.json names (established by torch 1.13 forward hooks in the
// generator); vitals must flag exactly that node, near the top of its ranking.
func TestReferencePathologies(t *testing.T) {
	for _, r := range allResults(t) {
		if r.model.Kind != "pathology" {
			continue
		}
		t.Run(r.model.Name, func(t *testing.T) {
			// numbers first: output and golden layers as for the architectures,
			// including exact dead/saturated fractions of the hidden layers
			checkResult(t, r)
			if r.err != nil {
				return
			}
			if r.rep.Input.Samples != 512 {
				t.Errorf("samples %d, want 512", r.rep.Input.Samples)
			}
			pat := r.model.Pathology
			if pat == nil {
				t.Fatal("index.json has no pathology entry")
			}
			if pat.Check == nil {
				// Healthy models (mlp_healthy 97.1% and cnn_bn 97.9% accuracy on
				// the sample, per index.json): no finding at error level.
				for _, f := range r.rep.Findings {
					if f.Severity == report.Error {
						t.Errorf("healthy model has an error finding: %s on %s: %s", f.Check, f.Node, f.Message)
					}
				}
				return
			}
			checkPathology(t, r, *pat.Check, *pat.Node)
			checkPathologyValue(t, r, *pat.Check, *pat.Node, pat.Value, pat.PerNode)
			for _, n := range pat.AlsoNodes {
				if len(findings(r.rep, *pat.Check, n)) == 0 {
					t.Errorf("%s does not fire on %s (index.json also_nodes)", *pat.Check, n)
				}
			}
		})
	}
}

// checkPathology asserts the expected check fires on the node and the node is
// in the top 3 of the ranking. The check and node come from index.json; what
// each one rests on is said at the check's definition and here:
//   - dead-units (mlp_dead): ReLU units never > 0 on the digits sample, counted
//     by torch 1.13 forward hooks (51.6% of /act2/Relu);
//   - saturation (sigmoid_saturated): sigmoid outputs <0.01 or >0.99, torch
//     1.13 hooks (93.6% of /act1/Sigmoid); raw 0..16 pixels with N(0,1) weights;
//   - symmetric-units (zero_init): all 32 rows of fc1.weight bit-identical
//     after training from zeros (symmetry is never broken);
//   - batchnorm-drift (cnn_bn_reset): running stats reset to 0/1 while the
//     data's per-channel variance is 2–7% of that (Ioffe & Szegedy 2015:
//     inference normalises with population statistics).
func checkPathology(t *testing.T, r *refResult, check, node string) {
	t.Helper()
	if len(findings(r.rep, check, node)) == 0 {
		var got []string
		for _, f := range r.rep.Findings {
			got = append(got, f.Check+"@"+f.Node)
		}
		t.Errorf("%s does not fire on %s; findings: %v", check, node, got)
	}
	pos := -1
	for i, rk := range r.rep.Ranking {
		if rk.Node == node {
			pos = i
		}
	}
	if pos < 0 || pos >= 3 {
		var top []string
		for _, rk := range r.rep.Ranking[:min(5, len(r.rep.Ranking))] {
			top = append(top, fmt.Sprintf("%s %.3g %v", rk.Node, rk.Score, rk.Checks))
		}
		t.Errorf("%s ranks at %d (want top 3); ranking starts %v", node, pos+1, top)
	}
}

// checkPathologyValue: for dead-units and saturation, index.json's value (the
// share torch 1.13 forward hooks counted on the digits sample) must be exactly
// the fraction vitals reports; both are counts over the same float32 values.
func checkPathologyValue(t *testing.T, r *refResult, check, node string, raw json.RawMessage, perNode map[string]float64) {
	t.Helper()
	frac := func(l *report.Layer) *float64 {
		if check == "dead-units" {
			return l.DeadFraction
		}
		return l.SaturatedFraction
	}
	if check != "dead-units" && check != "saturation" {
		return
	}
	var want float64
	if err := json.Unmarshal(raw, &want); err != nil {
		t.Fatalf("index.json value for %s: %v", check, err)
	}
	want2 := map[string]float64{node: want}
	for n, v := range perNode {
		want2[n] = v
	}
	for n, v := range want2 {
		l := r.rep.LayerByNode(n)
		if l == nil || frac(l) == nil {
			t.Errorf("%s: vitals reports no %s fraction", n, check)
			continue
		}
		if got := *frac(l); math.Abs(got-v) > 1e-12 {
			t.Errorf("%s: %s fraction %.10g, torch counted %.10g", n, check, got, v)
		}
	}
}

// rankOf is the 1-based ranking position of a node, 0 if unranked.
func rankOf(rep *report.Report, node string) int {
	for i, rk := range rep.Ranking {
		if rk.Node == node {
			return i + 1
		}
	}
	return 0
}

// The comparison itself must be able to fail: a golden layer nudged past each
// tolerance (and a dead count off by one unit) has to be reported.
func TestReferenceComparisonDetectsDeviations(t *testing.T) {
	var base *refResult
	for _, r := range allResults(t) {
		if r.model.Name == "mlp_dead" {
			base = r
		}
	}
	if base == nil || base.err != nil {
		t.Fatal("mlp_dead did not run")
	}
	var g goldenLayer
	for _, l := range base.golden.Layers {
		if l.OnnxNode == "/act2/Relu" {
			g = l
		}
	}
	if g.DeadFraction == nil || g.Units == nil {
		t.Fatal("golden /act2/Relu has no dead fraction")
	}
	oneUnit := *g.DeadFraction + 1/float64(*g.Units)
	cases := map[string]func(*goldenLayer){
		"mean":   func(l *goldenLayer) { l.Mean += 2e-3 * (math.Abs(l.Mean) + l.Std) },
		"std":    func(l *goldenLayer) { l.Std *= 1 + 2e-3 },
		"max":    func(l *goldenLayer) { l.Max *= 1 + 2e-4 },
		"dead":   func(l *goldenLayer) { l.DeadFraction = &oneUnit },
		"node":   func(l *goldenLayer) { l.OnnxOutput += "_missing" },
		"count":  func(l *goldenLayer) { l.Count++ },
		"intact": func(l *goldenLayer) {},
	}
	for name, mutate := range cases {
		r := &refResult{model: base.model, rep: base.rep}
		m := g
		mutate(&m)
		compareLayer(r, m)
		if name == "intact" {
			if len(r.problems) != 0 {
				t.Errorf("intact layer reported: %v", r.problems)
			}
		} else if len(r.problems) == 0 {
			t.Errorf("a %s deviation past its tolerance is not reported", name)
		}
	}
}
