package main

import (
	"encoding/json"
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
