package check_test

import (
	"context"
	"math"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/check"
	"github.com/vitals-health/vitals/internal/modeltest"
)

// TestGradientsMatchTorchOverBatches: the whole backward pass of Check on
// the digits MLP (512 samples cut into batches of 37, the last one short)
// against PyTorch 1.13 autograd of the mean cross-entropy over all 512
// samples in one piece (testdata/ref/mlp_healthy.grad.npz, written by
// testdata/gen/grad_golden.py): every weight's grad_norm within 1e-4
// relative, every layer's grad_rms within 1e-4, and the loss.
func TestGradientsMatchTorchOverBatches(t *testing.T) {
	m := load(t, "../testdata/ref/mlp_healthy.onnx")
	r, err := check.Check(context.Background(), m,
		check.Sample{Data: []string{"../testdata/ref/digits_sample.npy"}, Labels: "../testdata/ref/digits_labels.npy", Batch: 37},
		check.Options{Gradients: &check.Gradients{LR: 0.1}})
	if err != nil {
		t.Fatal(err)
	}
	want := modeltest.ReadNpz(t, "../testdata/ref/mlp_healthy.grad.npz")
	g := r.Gradients
	if g == nil || g.Samples != 512 || g.Batches != 14 || g.Batch != 37 || g.Target != "labels" || len(g.Missing) != 0 {
		t.Fatalf("gradients summary %+v", g)
	}
	if math.Abs(*g.Value-want["loss"][0]) > 1e-5*want["loss"][0] {
		t.Errorf("loss %.8g, torch %.8g", *g.Value, want["loss"][0])
	}
	n := 0
	for _, w := range r.Weights {
		ref, ok := want["w/"+w.Name]
		if !ok {
			continue
		}
		s := 0.0
		for _, v := range ref {
			s += v * v
		}
		if w.GradNorm == nil || math.Abs(*w.GradNorm-math.Sqrt(s)) > 1e-4*math.Sqrt(s) {
			t.Errorf("%s grad_norm %v, torch %.6g", w.Name, w.GradNorm, math.Sqrt(s))
			continue
		}
		if w.UpdateRatio == nil || math.Abs(*w.UpdateRatio-0.1**w.GradToWeight) > 1e-15 || math.Abs(*w.GradToWeight - *w.GradNorm / *w.Norm) > 1e-15 {
			t.Errorf("%s: update ratio %v, grad_to_weight %v", w.Name, w.UpdateRatio, w.GradToWeight)
		}
		n++
	}
	if n != 3 {
		t.Errorf("%d weights compared, want 3", n)
	}
	layers := 0
	for _, l := range r.Layers {
		ref, ok := want["rms/"+l.Output]
		if !ok {
			continue
		}
		if l.GradRMS == nil || math.Abs(*l.GradRMS-ref[0]) > 1e-4*ref[0] {
			t.Errorf("%s grad_rms %v, torch %.6g", l.Node, l.GradRMS, ref[0])
		}
		layers++
	}
	if layers < 4 {
		t.Errorf("%d layers compared", layers)
	}
}

// TestGradientsMissingOperatorListed: a model with an operator that has no
// gradient rule (the LSTM of lstm_classifier) still gets its whole report;
// the missing operator is named, the classifier head above it has
// gradients, the layers below it have none.
func TestGradientsMissingOperatorListed(t *testing.T) {
	m := load(t, "../testdata/ref/lstm_classifier.onnx")
	r, err := check.Check(context.Background(), m,
		check.Sample{Data: []string{"../testdata/ref/lstm_classifier.input.npy"}},
		check.Options{Gradients: &check.Gradients{}})
	if err != nil {
		t.Fatal(err)
	}
	g := r.Gradients
	if g == nil || len(g.Missing) != 1 || !strings.HasPrefix(g.Missing[0], "LSTM ") || !strings.Contains(g.Missing[0], `"/rnn/LSTM"`) || g.Target != "pseudo-labels" {
		t.Fatalf("gradients summary %+v", g)
	}
	var head, below bool
	for _, w := range r.Weights {
		if strings.Contains(w.Node, "Gemm") {
			head = w.GradNorm != nil
		}
		if w.Node == "/rnn/LSTM" {
			below = w.GradNorm != nil
		}
	}
	if !head || below {
		t.Errorf("head has gradient %v (want true), LSTM weights %v (want false)", head, below)
	}
	if len(r.Layers) == 0 {
		t.Fatal("no layers")
	}
}
