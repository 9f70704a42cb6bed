package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// `vitals check` on every model of the reference set (testdata/ref, written
// by testdata/gen from PyTorch exports) and on the control-flow models fed
// by one data file (testdata/controlflow: a Loop body, a Scan body, weights
// in Constant nodes) observes every node that ran, and every node ran: 100%
// coverage, stated in the JSON report and in the text report's first lines.
func TestCheckCoversEveryNode(t *testing.T) {
	type model struct{ onnx, data string }
	var models []model
	var idx struct {
		Models []struct {
			Files struct{ Model, Input string }
		}
	}
	b, err := os.ReadFile("../../testdata/ref/index.json")
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &idx); err != nil {
		t.Fatal(err)
	}
	for _, m := range idx.Models {
		models = append(models, model{filepath.Join("../../testdata/ref", m.Files.Model), filepath.Join("../../testdata/ref", m.Files.Input)})
	}
	for _, name := range []string{"loop_rnn", "scan_seq", "const_weights"} {
		p := filepath.Join("../../testdata/controlflow", name)
		models = append(models, model{p + ".onnx", p + ".input.npy"})
	}
	if len(models) < 15 {
		t.Fatalf("only %d models", len(models))
	}
	for _, m := range models {
		t.Run(filepath.Base(m.onnx), func(t *testing.T) {
			code, out, stderr := runCLI(t, "check", m.onnx, "--data", m.data, "--format", "json")
			if code != 0 && code != 1 {
				t.Fatalf("exit %d: %s", code, stderr)
			}
			var r report.Report
			if err := json.Unmarshal([]byte(out), &r); err != nil {
				t.Fatal(err)
			}
			c := r.Coverage
			if c == nil || c.Nodes == 0 || c.Nodes != r.Model.Nodes || c.Executed != c.Nodes || c.Observed != c.Nodes || len(c.NotObserved) != 0 {
				t.Fatalf("coverage %+v of a %d-node model, want every node executed and observed", c, r.Model.Nodes)
			}
			_, text, _ := runCLI(t, "check", m.onnx, "--data", m.data)
			want := report.CoverageLine(&r)
			lines := strings.SplitN(text, "\n", 5)[:4]
			found := false
			for _, l := range lines {
				found = found || l == want
			}
			if !found {
				t.Fatalf("the text report's first lines %q do not state the coverage %q", lines, want)
			}
		})
	}
}

// vitals check on a model whose network sits in the else branch of an If
// guarding its own input (testdata/controlflow/if_guard, written by
// testdata/gen/controlflow_models.py; golden statistics from NumPy): the
// branch's layers carry NumPy's statistics, every parameter is counted, and
// the then branch, never taken on the sample, is listed node by node with
// the reason in the JSON report and stated in the text report.
func TestCheckListsBranchNeverTaken(t *testing.T) {
	const dir = "../../testdata/controlflow/"
	var g struct {
		Nodes       int      `json:"nodes"`
		InSubgraphs int      `json:"nodes_in_subgraphs"`
		Parameters  int64    `json:"parameters"`
		NeverTaken  []string `json:"never_taken"`
		Reason      string   `json:"never_taken_reason"`
		Layers      []struct {
			Node  string   `json:"node"`
			Count int64    `json:"count"`
			Mean  float64  `json:"mean"`
			Std   float64  `json:"std"`
			Dead  *float64 `json:"dead_fraction"`
		} `json:"layers"`
	}
	b, err := os.ReadFile(dir + "if_guard.golden.json")
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &g); err != nil {
		t.Fatal(err)
	}
	code, out, stderr := runCLI(t, "check", dir+"if_guard.onnx", "--data", dir+"if_guard.input.npy", "--format", "json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var r report.Report
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatal(err)
	}
	c := r.Coverage
	if r.Model.Nodes != g.Nodes || r.Model.Parameters != g.Parameters || c.InSubgraphs != g.InSubgraphs ||
		c.Executed != g.Nodes-len(g.NeverTaken) || c.Observed != c.Executed || len(c.NotObserved) != len(g.NeverTaken) {
		t.Fatalf("%d nodes, %d parameters, coverage %+v; want %d nodes (%d in subgraphs), %d parameters, %d never taken",
			r.Model.Nodes, r.Model.Parameters, c, g.Nodes, g.InSubgraphs, g.Parameters, len(g.NeverTaken))
	}
	for i, u := range c.NotObserved {
		if u.Node != g.NeverTaken[i] || u.Reason != g.Reason {
			t.Errorf("not observed %+v, want %s: %s", u, g.NeverTaken[i], g.Reason)
		}
	}
	for _, w := range g.Layers {
		l := r.LayerByNode(w.Node)
		if l == nil {
			t.Errorf("no layer %s", w.Node)
			continue
		}
		if l.Count != w.Count || math.Abs(*l.Mean-w.Mean) > 1e-5*math.Max(math.Abs(w.Mean), w.Std) ||
			math.Abs(*l.Std-w.Std) > 1e-5*w.Std || (w.Dead != nil && *l.DeadFraction != *w.Dead) {
			t.Errorf("%s: count %d mean %v std %v; NumPy count %d mean %v std %v", w.Node, l.Count, *l.Mean, *l.Std, w.Count, w.Mean, w.Std)
		}
	}
	_, text, _ := runCLI(t, "check", dir+"if_guard.onnx", "--data", dir+"if_guard.input.npy")
	if lines := strings.SplitN(text, "\n", 4); lines[2] != report.CoverageLine(&r) ||
		!strings.Contains(text, "Not observed:\n    "+g.Reason+": 3 nodes (") {
		t.Errorf("text report:\n%s", text)
	}
}

// TestIfRateFixedScalar runs the sample-rate model as a user would: the
// per-sample waveform from a file and the scalar rate with --fixed. The then
// branch (taken for 16000, see testdata/gen/controlflow_models.py) is
// reported layer by layer and the else branch is listed as never taken.
func TestIfRateFixedScalar(t *testing.T) {
	code, out, errOut := runCLI(t, "check", "../../testdata/controlflow/if_rate.onnx",
		"--data", "input=../../testdata/controlflow/if_rate.input.npy", "--fixed", "sr=16000")
	if code != 0 && code != 1 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	for _, want := range []string{"/If/then/k16/conv1/Conv", "/If/then/k16/act/Tanh",
		"else_branch of /If never taken on this sample", "Coverage: 9 of 15 nodes observed"} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "/If/else/k8/conv1/Conv  ") {
		t.Errorf("else-branch layer reported as observed:\n%s", out)
	}
}
