package grad

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/internal/modeltest"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

func refDir(t *testing.T) string {
	d := filepath.Join("..", "testdata", "ref")
	if _, err := os.Stat(d); err != nil {
		t.Skip("testdata/ref not found")
	}
	return d
}

type refModel struct {
	Name  string
	Kind  string
	Files map[string]string
}

// runBatch runs a model on one batch, records it and returns the tape and
// the graph output.
func runBatch(t *testing.T, m *loader.Model, x *tensor.Tensor) (*Tape, *tensor.Tensor) {
	t.Helper()
	p, err := probe.Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	tape := NewTape(p)
	in := map[string]*tensor.Tensor{m.Graph.Inputs[0].Name: x}
	tape.Reset(in)
	outs, err := p.Run(in, func(n *loader.Node, o []*tensor.Tensor) error { tape.Record(n, o); return nil })
	if err != nil {
		t.Fatal(err)
	}
	return tape, outs[m.Graph.Outputs[0].Name]
}

// TestAgainstTorchAutograd: dL/dW for every weight of the reference
// architectures and the digits models against PyTorch 1.13 autograd in
// float64 (testdata/gen/grad_golden.py writes <name>.grad.npz), L the mean
// cross-entropy over the sample; relative error ‖g − g_torch‖/‖g_torch‖
// ≤ 1e-4. The activation-gradient RMS of every node output is checked the
// same way. All 15 models, the LSTM and GRU classifiers (embedding Gather
// included) among them.
func TestAgainstTorchAutograd(t *testing.T) {
	dir := refDir(t)
	var index struct{ Models []refModel }
	b, err := os.ReadFile(filepath.Join(dir, "index.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &index); err != nil {
		t.Fatal(err)
	}
	tested := 0
	for _, rm := range index.Models {
		t.Run(rm.Name, func(t *testing.T) {
			m, err := loader.LoadModel(filepath.Join(dir, rm.Files["model"]))
			if err != nil {
				t.Fatal(err)
			}
			x, err := loader.ReadNpy(filepath.Join(dir, rm.Files["input"]))
			if err != nil {
				t.Fatal(err)
			}
			tape, out := runBatch(t, m, x)
			golden := filepath.Join(dir, rm.Name+".grad.npz")
			if _, err := os.Stat(golden); err != nil {
				t.Fatalf("%v (run testdata/gen/grad_golden.py)", err)
			}
			want := modeltest.ReadNpz(t, golden)
			labels := make([]int64, len(want["labels"]))
			for i, v := range want["labels"] {
				labels[i] = int64(v)
			}
			loss, seed, err := CrossEntropy(out, labels, false)
			if err != nil {
				t.Fatal(err)
			}
			acc := NewAccumulator()
			if err := acc.Add(tape, m.Graph.Outputs[0].Name, loss, seed, x.Shape[0]); err != nil {
				t.Fatal(err)
			}
			if len(acc.Missing()) > 0 {
				t.Fatalf("missing VJPs: %v", acc.Missing())
			}
			if l := acc.Loss(); math.Abs(l-want["loss"][0]) > 1e-5*math.Abs(want["loss"][0]) {
				t.Errorf("loss %.8g, torch %.8g", l, want["loss"][0])
			}
			// floor: a gradient that is zero in exact arithmetic (the key
			// bias of attention: softmax does not change when a row is
			// shifted) comes out as float32 rounding of the forward pass
			// here and as float64 rounding in torch; such weights are
			// compared against 1e-4 of the model's largest weight gradient.
			floor := 0.0
			for key, ref := range want {
				if strings.HasPrefix(key, "w/") {
					floor = max(floor, 1e-4*norm(ref))
				}
			}
			weights, worst := 0, 0.0
			for key, ref := range want {
				name, ok := strings.CutPrefix(key, "w/")
				if !ok {
					continue
				}
				got := acc.Param(name)
				if got == nil {
					t.Errorf("%s: no gradient", name)
					continue
				}
				e := relErr(got, ref, floor)
				worst = max(worst, e)
				if e > 1e-4 {
					t.Errorf("dL/d%s: relative error %.2e (‖g‖ %.4g, torch %.4g)", name, e, norm(got), norm(ref))
				}
				weights++
			}
			acts, worstRMS := 0, 0.0
			for key, ref := range want {
				name, ok := strings.CutPrefix(key, "rms/")
				if !ok {
					continue
				}
				got, ok := acc.RMS(name)
				if !ok {
					t.Errorf("%s: no activation gradient", name)
					continue
				}
				e := math.Abs(got-ref[0]) / math.Max(ref[0], 1e-30)
				if ref[0] == 0 {
					e = got
				}
				worstRMS = max(worstRMS, e)
				if e > 1e-4 {
					t.Errorf("grad_rms(%s) = %.6g, torch %.6g", name, got, ref[0])
				}
				acts++
			}
			if weights == 0 {
				t.Fatal("golden file has no weights")
			}
			t.Logf("%d weights (worst relative error %.1e), %d activations (worst %.1e)", weights, worst, acts, worstRMS)
			tested++
		})
	}
	if tested < 15 {
		t.Errorf("only %d models checked against torch", tested)
	}
}

func norm(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v * v
	}
	return math.Sqrt(s)
}

// relErr is ‖a − b‖/max(‖b‖, floor).
func relErr(a, b []float64, floor float64) float64 {
	if len(a) != len(b) {
		return math.Inf(1)
	}
	d := make([]float64, len(a))
	for i := range a {
		d[i] = a[i] - b[i]
	}
	if nb := max(norm(b), floor); nb > 0 {
		return norm(d) / nb
	}
	return norm(d)
}
