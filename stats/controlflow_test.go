package stats_test

// Control flow: statistics of the nodes inside If branches and Loop/Scan
// bodies, and weights held in Constant nodes, against NumPy. The models,
// inputs and golden statistics under testdata/controlflow were written by
// testdata/gen/controlflow_models.py (onnx 1.12 helper API; the golden
// statistics are NumPy evaluations of the same networks, accumulated in
// float64 over every execution: each batch that took a branch, each loop
// iteration and scan step). testdata/gen/controlflow_ort.sh checked the
// same golden layers with ONNX Runtime running the branch and body graphs
// with their inner tensors exposed (testdata/controlflow/ort_check.txt).
// Nothing on the reference side is computed by vitals' own code.

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/stats"
	"github.com/vitals-health/vitals/tensor"
)

const ctlDir = "../testdata/controlflow"

type ctlLayer struct {
	Node       string   `json:"node"`
	Op         string   `json:"op"`
	Output     string   `json:"output"`
	Shape      []int    `json:"shape"`
	Executions int      `json:"executions"`
	Count      int64    `json:"count"`
	Mean       float64  `json:"mean"`
	Std        float64  `json:"std"`
	Min        float64  `json:"min"`
	Max        float64  `json:"max"`
	Zero       float64  `json:"zero_fraction"`
	Units      *int     `json:"units"`
	UnitAxis   *int     `json:"unit_axis"`
	Dead       *float64 `json:"dead_fraction"`
	Saturated  *float64 `json:"saturated_fraction"`
}

type ctlWeight struct {
	Name  string  `json:"name"`
	Node  string  `json:"node"`
	Shape []int   `json:"shape"`
	FanIn int     `json:"fan_in"`
	Std   float64 `json:"std"`
	Gain  float64 `json:"gain"`
}

type ctlGolden struct {
	Model          string            `json:"model"`
	Input          string            `json:"input"`
	InputName      string            `json:"input_name"`
	Batch          int               `json:"batch"`
	ScalarInput    string            `json:"scalar_input"`
	ScalarPerBatch []int64           `json:"scalar_per_batch"`
	BranchModels   map[string]string `json:"branch_models"`
	Nodes          int               `json:"nodes"`
	InSubgraphs    int               `json:"nodes_in_subgraphs"`
	Parameters     int64             `json:"parameters"`
	SubgraphRuns   map[string]int64  `json:"subgraph_runs"`
	Layers         []ctlLayer        `json:"layers"`
	Weights        []ctlWeight       `json:"weights"`
	Output         [][]float64       `json:"output"`
}

// ctlRun runs a model over batches of its input file (with the scalar input
// of each batch, when the golden file has one), through the collector as
// vitals check does, and returns the report and the first output's values.
func ctlRun(t *testing.T, path string, g ctlGolden, scalars []int64) (*report.Report, []float32) {
	t.Helper()
	mod, plan := stats.LoadPlan(t, path)
	x, err := loader.ReadNpy(filepath.Join(ctlDir, g.Input))
	if err != nil {
		t.Fatal(err)
	}
	c := stats.NewCollector(mod, plan)
	pool := tensor.NewPool(1 << 26)
	arena := &tensor.Arena{Pool: pool}
	dead := c.AfterObserved(pool.Put)
	var got []float32
	out := mod.Graph.Outputs[0].Name
	for k, lo := 0, 0; lo < x.Shape[0]; k, lo = k+1, lo+g.Batch {
		hi := min(lo+g.Batch, x.Shape[0])
		in := map[string]*tensor.Tensor{g.InputName: sliceRows(x, lo, hi)}
		if scalars != nil {
			in[g.ScalarInput] = tensor.From([]int64{scalars[k]})
		}
		c.AddInputs(in)
		outs, released, err := plan.RunRecycled(arena, in, c.Hook, dead, nil)
		if err != nil {
			t.Fatalf("batch %d: %v", k, err)
		}
		if err := c.Sync(); err != nil {
			t.Fatal(err)
		}
		c.AddOutputs(outs, nil)
		c.Samples += hi - lo
		got = append(got, outs[out].F32()...)
		pool.Recycle(released, []*tensor.Tensor{in[g.InputName], outs[out]})
	}
	col := c.Finish("file")
	if err := stats.Run(col, stats.Checks, nil); err != nil {
		t.Fatal(err)
	}
	return col.Report, got
}

func readCtlGolden(t *testing.T, name string) ctlGolden {
	t.Helper()
	var g ctlGolden
	readJSON(t, filepath.Join(ctlDir, name+".golden.json"), &g)
	return g
}

// near: |got−want| ≤ rel·scale, scale = max(|want|, floor).
func near(got, want, rel, floor float64) bool {
	return math.Abs(got-want) <= rel*math.Max(math.Abs(want), floor)
}

// checkCtlLayers compares every golden layer (a node inside a branch or body
// named by vitals' scheme, docs/subgraphs.md) with the report's. Tolerances:
// mean and std 1e-5 relative (std as the floor for a mean near zero), min
// and max 1e-5 of the layer's largest magnitude (both sides hold the same
// float32 activations up to the rounding of float32 sums); counts, units,
// zero and dead fractions exact; the saturated share within one element.
func checkCtlLayers(t *testing.T, r *report.Report, layers []ctlLayer) {
	t.Helper()
	for _, w := range layers {
		var l *report.Layer
		for i := range r.Layers {
			if r.Layers[i].Node == w.Node && r.Layers[i].Output == w.Output {
				l = &r.Layers[i]
			}
		}
		if l == nil {
			var have []string
			for _, x := range r.Layers {
				have = append(have, x.Node+" → "+x.Output)
			}
			t.Errorf("no layer %s → %s; the report has:\n%s", w.Node, w.Output, strings.Join(have, "\n"))
			continue
		}
		bad := func(what string, got, want any) {
			t.Errorf("%s (%s): %s = %v, NumPy %v", w.Node, w.Op, what, got, want)
		}
		if l.Op != w.Op {
			bad("op", l.Op, w.Op)
		}
		if !slices.Equal(l.Shape, w.Shape) {
			bad("shape", l.Shape, w.Shape)
		}
		if l.Count != w.Count {
			bad("count", l.Count, w.Count)
		}
		mag := math.Max(math.Abs(w.Min), math.Abs(w.Max))
		if !near(report.Val(l.Mean), w.Mean, 1e-5, w.Std) {
			bad("mean", report.Val(l.Mean), w.Mean)
		}
		if !near(report.Val(l.Std), w.Std, 1e-5, 0) {
			bad("std", report.Val(l.Std), w.Std)
		}
		if !near(report.Val(l.Min), w.Min, 1e-5, mag) || !near(report.Val(l.Max), w.Max, 1e-5, mag) {
			bad("min/max", [2]float64{report.Val(l.Min), report.Val(l.Max)}, [2]float64{w.Min, w.Max})
		}
		if report.Val(l.ZeroFraction) != w.Zero {
			bad("zero fraction", report.Val(l.ZeroFraction), w.Zero)
		}
		if (w.Units == nil) != (l.Units == nil) || (w.Units != nil && (*w.Units != *l.Units || *w.UnitAxis != *l.UnitAxis)) {
			bad("units/axis", fmt.Sprint(l.Units, l.UnitAxis), fmt.Sprint(w.Units, w.UnitAxis))
		}
		if w.Dead != nil && report.Val(l.DeadFraction) != *w.Dead {
			bad("dead fraction", report.Val(l.DeadFraction), *w.Dead)
		}
		if w.Saturated != nil && !near(report.Val(l.SaturatedFraction), *w.Saturated, 0, 0) &&
			math.Abs(report.Val(l.SaturatedFraction)-*w.Saturated)*float64(w.Count) > 1 {
			bad("saturated fraction", report.Val(l.SaturatedFraction), *w.Saturated)
		}
	}
}

// checkCtlModel compares the header counts, subgraph runs, weights and the
// final output with the golden file, and requires full coverage.
func checkCtlModel(t *testing.T, r *report.Report, g ctlGolden, out []float32) {
	t.Helper()
	if r.Model.Nodes != g.Nodes || r.Model.Parameters != g.Parameters {
		t.Errorf("header: %d nodes, %d parameters; the model has %d nodes (%d in subgraphs) and %d float weights",
			r.Model.Nodes, r.Model.Parameters, g.Nodes, g.InSubgraphs, g.Parameters)
	}
	cov := r.Coverage
	if cov == nil || cov.Nodes != g.Nodes || cov.InSubgraphs != g.InSubgraphs || cov.Observed != g.Nodes || len(cov.NotObserved) != 0 {
		t.Errorf("coverage %+v, want all %d nodes (%d in subgraphs) observed", cov, g.Nodes, g.InSubgraphs)
	}
	if cov != nil {
		runs := map[string]int64{}
		for _, s := range cov.Subgraphs {
			if s.Runs > 0 {
				runs[s.Name] = s.Runs
			}
		}
		if fmt.Sprint(runs) != fmt.Sprint(g.SubgraphRuns) {
			t.Errorf("subgraph runs %v, want %v", runs, g.SubgraphRuns)
		}
	}
	for _, w := range g.Weights {
		var got *report.Weight
		for i := range r.Weights {
			if r.Weights[i].Name == w.Name {
				got = &r.Weights[i]
			}
		}
		if got == nil {
			t.Errorf("no weight statistics for %q", w.Name)
			continue
		}
		if got.Node != w.Node || got.FanIn != w.FanIn || !slices.Equal(got.Shape, w.Shape) ||
			!near(report.Val(got.Std), w.Std, 1e-6, 0) || !near(report.Val(got.Gain), w.Gain, 1e-6, 0) {
			t.Errorf("weight %s: node %s, shape %v, fan-in %d, std %v, gain %v; NumPy: node %s, shape %v, fan-in %d, std %v, gain %v",
				w.Name, got.Node, got.Shape, got.FanIn, report.Val(got.Std), report.Val(got.Gain), w.Node, w.Shape, w.FanIn, w.Std, w.Gain)
		}
	}
	if len(g.Output) > 0 {
		var want []float64
		for _, row := range g.Output {
			want = append(want, row...)
		}
		if len(out) != len(want) {
			t.Fatalf("output has %d values, NumPy's %d", len(out), len(want))
		}
		for i := range want {
			if math.Abs(float64(out[i])-want[i]) > 1e-5+1e-5*math.Abs(want[i]) {
				t.Fatalf("output[%d] = %v, NumPy %v", i, out[i], want[i])
			}
		}
	}
}

// Loop running a tanh recurrent cell for T steps; Scan running a ReLU cell
// over a sequence (2 of 8 units dead by construction); a classifier whose
// weights are Constant nodes (all 256 parameters counted, both weights
// checked).
func TestControlFlowAgainstNumPy(t *testing.T) {
	for _, name := range []string{"loop_rnn", "scan_seq", "const_weights"} {
		t.Run(name, func(t *testing.T) {
			g := readCtlGolden(t, name)
			r, out := ctlRun(t, filepath.Join(ctlDir, g.Model), g, nil)
			checkCtlLayers(t, r, g.Layers)
			checkCtlModel(t, r, g, out)
		})
	}
}

// A network in both branches of an If on a scalar sample rate: batches at
// 16 kHz take the then branch, the 8 kHz batch the else branch; each
// branch's statistics accumulate over the batches that took it (NumPy).
func TestIfBranchesAgainstNumPy(t *testing.T) {
	g := readCtlGolden(t, "if_rate")
	r, out := ctlRun(t, filepath.Join(ctlDir, g.Model), g, g.ScalarPerBatch)
	checkCtlLayers(t, r, g.Layers)
	checkCtlModel(t, r, g, out)
	if fs := findings(r, "dead-units", "/If/then/k16/relu1/Relu"); len(fs) != 1 {
		t.Errorf("dead-units on the then branch's ReLU (2 of 8 channels dead by construction): %v", fs)
	}
}

// The statistics of a node inside a branch equal those of the same node in
// the branch's graph run on its own as a model (if_rate.then.onnx and
// if_rate.else.onnx, written by the generator from the branch graphs) over
// the batches that took the branch: bit for bit, as the same kernels see
// the same values.
func TestIfBranchEqualsBranchModel(t *testing.T) {
	g := readCtlGolden(t, "if_rate")
	full, _ := ctlRun(t, filepath.Join(ctlDir, g.Model), g, g.ScalarPerBatch)
	x, err := loader.ReadNpy(filepath.Join(ctlDir, g.Input))
	if err != nil {
		t.Fatal(err)
	}
	for prefix, file := range g.BranchModels {
		// the input rows of the batches that took this branch
		var rows []*tensor.Tensor
		for k, sr := range g.ScalarPerBatch {
			if (sr == 16000) == strings.HasSuffix(prefix, "/then") {
				rows = append(rows, sliceRows(x, k*g.Batch, (k+1)*g.Batch))
			}
		}
		own := g
		own.Input, own.ScalarInput = "", ""
		mod, plan := stats.LoadPlan(t, filepath.Join(ctlDir, file))
		c := stats.NewCollector(mod, plan)
		for _, b := range rows {
			in := map[string]*tensor.Tensor{"input": b}
			if _, err := plan.Run(in, c.Hook); err != nil {
				t.Fatal(err)
			}
		}
		alone := c.Finish("file").Report
		if len(alone.Layers) != 6 {
			t.Fatalf("%s alone: %d layers, want 6", file, len(alone.Layers))
		}
		for _, l := range alone.Layers {
			in := full.LayerByNode(prefix + l.Node)
			if in == nil {
				t.Errorf("no layer %s in the full model", prefix+l.Node)
				continue
			}
			a, b := *in, l
			a.Node, a.Output, a.Depth, b.Node, b.Output, b.Depth = "", "", 0, "", "", 0
			ja, _ := json.Marshal(a)
			jb, _ := json.Marshal(b)
			if string(ja) != string(jb) {
				t.Errorf("%s: inside the If %s, alone %s", prefix+l.Node, ja, jb)
			}
		}
	}
}

// A branch never taken on the sample is listed node by node in the
// coverage, with the reason, and the header line says so.
func TestIfBranchNeverTaken(t *testing.T) {
	g := readCtlGolden(t, "if_rate")
	r, _ := ctlRun(t, filepath.Join(ctlDir, g.Model), g, []int64{16000, 16000, 16000, 16000})
	cov := r.Coverage
	if cov.Nodes != 15 || cov.Executed != 9 || cov.Observed != 9 || len(cov.NotObserved) != 6 {
		t.Fatalf("coverage %+v, want 9 of 15 nodes executed and observed, the 6 of the else branch not", cov)
	}
	for _, u := range cov.NotObserved {
		if !strings.HasPrefix(u.Node, "/If/else/") || u.Reason != "else_branch of /If never taken on this sample" {
			t.Errorf("not observed: %+v", u)
		}
	}
	for _, l := range r.Layers {
		if strings.HasPrefix(l.Node, "/If/else/") {
			t.Errorf("layer %s of the branch never taken has statistics", l.Node)
		}
	}
	line := report.CoverageLine(r)
	if !strings.Contains(line, "9 of 15 nodes observed") || !strings.Contains(line, "6 sit in subgraphs that never ran") {
		t.Errorf("coverage line %q", line)
	}
}

// A node that runs but never reaches the collector (here: a hook that drops
// the Loop body's calls) is counted as executed from the executor's run
// counts, not observed by the hook, listed with that reason, and the report
// opens with a warning.
func TestCoverageReportsUnobservedNodes(t *testing.T) {
	g := readCtlGolden(t, "loop_rnn")
	mod, plan := stats.LoadPlan(t, filepath.Join(ctlDir, g.Model))
	x, err := loader.ReadNpy(filepath.Join(ctlDir, g.Input))
	if err != nil {
		t.Fatal(err)
	}
	c := stats.NewCollector(mod, plan)
	hook := func(n *loader.Node, outs []*tensor.Tensor) error {
		if strings.HasPrefix(n.Name, "/Loop/body/") {
			return nil
		}
		return c.Hook(n, outs)
	}
	if _, err := plan.Run(map[string]*tensor.Tensor{"input": x}, hook); err != nil {
		t.Fatal(err)
	}
	r := c.Finish("file").Report
	cov := r.Coverage
	if cov.Nodes != 19 || cov.Executed != 19 || cov.Observed != 12 || len(cov.NotObserved) != 7 {
		t.Fatalf("coverage %+v, want 19 nodes executed, 12 observed", cov)
	}
	for _, u := range cov.NotObserved {
		if !strings.HasPrefix(u.Node, "/Loop/body/") || u.Reason != "ran without being observed" {
			t.Errorf("not observed: %+v", u)
		}
	}
	if w := report.CoverageWarning(r); !strings.Contains(w, "7 of the 19 nodes that ran were not observed") {
		t.Errorf("warning %q", w)
	}
}

// sliceRows returns rows [lo,hi) of axis 0 of a float32 tensor (a copy).
// (Batches here are cut by hand: each batch of the If model gets its own
// sample rate, which one run of check.Check with a fixed input cannot give.)
func sliceRows(t *tensor.Tensor, lo, hi int) *tensor.Tensor {
	row := t.Size() / t.Shape[0]
	out := tensor.New(t.DType, append([]int{hi - lo}, t.Shape[1:]...))
	copy(out.F32(), t.F32()[lo*row:hi*row])
	return out
}

// readJSON decodes the JSON file at path into v.
func readJSON(t testing.TB, path string, v any) {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
}
