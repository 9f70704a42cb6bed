package check_test

import (
	"context"
	"fmt"
	"math"
	"math/rand"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/check"
	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/internal/modeltest"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/report"
	"github.com/vitals-health/vitals/tensor"
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
// gradient rule (CumSum between two Gemm layers) still gets its whole
// report; the missing operator is named, the layer above it has gradients,
// the layer below it has none.
func TestGradientsMissingOperatorListed(t *testing.T) {
	r0 := rand.New(rand.NewSource(2))
	b := modelbuild.New("cumsum", 13)
	b.Input("x", []int{1, 8}, true)
	w := func(n int) []float32 {
		v := make([]float32, n)
		for i := range v {
			v[i] = float32(r0.NormFloat64() / 3)
		}
		return v
	}
	b.Init("w1", []int{8, 8}, w(64))
	b.Init("w2", []int{4, 8}, w(32))
	b.Node("Constant", "/axis", nil, []string{"axis"}, modelbuild.Attr{Name: "value_int", Value: int64(1)})
	h := b.Node("Gemm", "/fc1/Gemm", []string{"x", "w1"}, []string{"h"}, modelbuild.Attr{Name: "transB", Value: int64(1)})
	s := b.Node("CumSum", "/cum/CumSum", []string{h, "axis"}, []string{"s"})
	b.Node("Gemm", "/fc2/Gemm", []string{s, "w2"}, []string{"y"}, modelbuild.Attr{Name: "transB", Value: int64(1)})
	b.Output("y")
	path := filepath.Join(t.TempDir(), "cumsum.onnx")
	if err := b.Write(path); err != nil {
		t.Fatal(err)
	}
	r, err := check.Check(context.Background(), load(t, path), check.Sample{Samples: 16}, check.Options{Gradients: &check.Gradients{}})
	if err != nil {
		t.Fatal(err)
	}
	g := r.Gradients
	if g == nil || len(g.Missing) != 1 || !strings.HasPrefix(g.Missing[0], "CumSum ") || !strings.Contains(g.Missing[0], `"/cum/CumSum"`) || g.Target != "pseudo-labels" {
		t.Fatalf("gradients summary %+v", g)
	}
	got := map[string]bool{}
	for _, w := range r.Weights {
		got[w.Name] = w.GradNorm != nil
	}
	if !got["w2"] || got["w1"] {
		t.Errorf("w2 has a gradient: %v (want true), w1: %v (want false)", got["w2"], got["w1"])
	}
	if len(r.Layers) == 0 || len(r.Findings) == 0 && r.Output == nil {
		t.Fatal("report incomplete")
	}
}

// deepTanh writes an MLP of 6 tanh layers (width 32) on 16 inputs; the
// weights have std 1/√fan_in (Xavier/LeCun gain 1, Glorot & Bengio 2010),
// the biases are ±bias: with bias 4.5 every pre-activation sits far out on
// the flat part of tanh (the forward pass saturates), with 0 it does not.
func deepTanh(t *testing.T, bias float64) string {
	r := rand.New(rand.NewSource(5))
	b := modelbuild.New("deep_tanh", 13)
	b.Input("x", []int{1, 16}, true)
	prev, in := "x", 16
	for l := 1; l <= 7; l++ {
		out := 32
		if l == 7 {
			out = 10
		}
		w := make([]float32, out*in)
		for i := range w {
			w[i] = float32(r.NormFloat64() / math.Sqrt(float64(in)))
		}
		bv := make([]float32, out)
		for i := range bv {
			if l < 7 {
				bv[i] = float32(bias * (1 + 0.2*r.Float64()) * float64(1-2*(i%2)))
			}
		}
		b.Init(fmt.Sprintf("w%d", l), []int{out, in}, w)
		b.Init(fmt.Sprintf("b%d", l), []int{out}, bv)
		y := b.Node("Gemm", fmt.Sprintf("/fc%d/Gemm", l), []string{prev, fmt.Sprintf("w%d", l), fmt.Sprintf("b%d", l)}, []string{fmt.Sprintf("z%d", l)}, modelbuild.Attr{Name: "transB", Value: int64(1)})
		prev = y
		if l < 7 {
			prev = b.Node("Tanh", fmt.Sprintf("/act%d/Tanh", l), []string{y}, []string{fmt.Sprintf("h%d", l)})
		}
		in = out
	}
	b.Output(prev)
	path := filepath.Join(t.TempDir(), "deep_tanh.onnx")
	if err := b.Write(path); err != nil {
		t.Fatal(err)
	}
	return path
}

// TestSaturatedStackVanishes: a deep tanh stack whose forward pass
// saturates gets the gradient-vanishing finding at its first layer, naming
// the saturated layers (which have saturation findings of their own) as the
// cause; the same stack without the biases does not (a ratio of about
// 0.1 over 6 layers: E[tanh'(z)²] ≈ 0.5 per layer at gain 1).
func TestSaturatedStackVanishes(t *testing.T) {
	for _, c := range []struct {
		bias float64
		want bool
	}{{4.5, true}, {0, false}} {
		m := load(t, deepTanh(t, c.bias))
		r, err := check.Check(context.Background(), m, check.Sample{Samples: 64}, check.Options{Gradients: &check.Gradients{}})
		if err != nil {
			t.Fatal(err)
		}
		saturated := map[string]bool{}
		for _, f := range r.Findings {
			if f.Check == "saturation" {
				saturated[f.Node] = true
			}
		}
		var v *report.Finding
		for i, f := range r.Findings {
			if f.Check == "gradient-vanishing" {
				v = &r.Findings[i]
			}
		}
		if !c.want {
			if v != nil {
				t.Errorf("bias 0: unexpected finding %s", v.Message)
			}
			continue
		}
		if v == nil {
			t.Fatalf("bias %g: no gradient-vanishing finding; findings %+v", c.bias, r.Findings)
		}
		if v.Node != "/act1/Tanh" || v.Severity != report.Error {
			t.Errorf("finding at %s (%s), want /act1/Tanh, error", v.Node, v.Severity)
		}
		causes, _ := v.Evidence["explained_by"].([]any)
		named := 0
		for _, c := range causes {
			cm := c.(map[string]any)
			if cm["check"] == "saturation" && saturated[cm["node"].(string)] {
				named++
			}
		}
		if len(saturated) < 4 || named != len(saturated) || !strings.Contains(v.Message, "saturated") {
			t.Errorf("%d saturated layers, %d named as cause: %s", len(saturated), named, v.Message)
		}
		t.Log(v.Message)
	}
}

// TestGradientsMSE: --loss mse against targets equal to the model's own
// outputs has L = 0 and every gradient exactly 0 (a known answer), which
// the gradient-zero check reports for every weight; a targets file of the
// wrong width stops the backward pass with a message and keeps the report.
func TestGradientsMSE(t *testing.T) {
	m := load(t, "../testdata/ref/mlp_healthy.onnx")
	sample := check.Sample{Data: []string{"../testdata/ref/digits_sample.npy"}, Samples: 100, Batch: 32}
	var rows []float32
	_, err := check.Check(context.Background(), m, sample, check.Options{Outputs: func(outs map[string]*tensor.Tensor, k int) error {
		rows = append(rows, outs["output"].F32()...)
		return nil
	}})
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	write := func(name string, v []float32, shape ...int) string {
		p := filepath.Join(dir, name)
		f, err := os.Create(p)
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		if err := loader.WriteNpy(f, tensor.From(v, shape...)); err != nil {
			t.Fatal(err)
		}
		return p
	}
	same := write("same.npy", rows, 100, len(rows)/100)
	r, err := check.Check(context.Background(), m, sample, check.Options{Gradients: &check.Gradients{Loss: "mse", Targets: same}})
	if err != nil {
		t.Fatal(err)
	}
	if g := r.Gradients; g.Loss != "mse" || g.Target != "targets" || *g.Value != 0 || g.Samples != 100 {
		t.Fatalf("gradients %+v", g)
	}
	zero := 0
	for _, f := range r.Findings {
		if f.Check == "gradient-zero" {
			zero++
		}
	}
	for _, w := range r.Weights {
		if w.GradNorm == nil || *w.GradNorm != 0 {
			t.Errorf("%s: grad_norm %v, want 0", w.Name, w.GradNorm)
		}
	}
	if zero != len(r.Weights) {
		t.Errorf("%d gradient-zero findings for %d weights", zero, len(r.Weights))
	}
	narrow := write("narrow.npy", rows[:300], 100, 3)
	r, err = check.Check(context.Background(), m, sample, check.Options{Gradients: &check.Gradients{Loss: "mse", Targets: narrow}})
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(r.Gradients.Stopped, "narrow.npy") || len(r.Layers) == 0 {
		t.Errorf("stopped %q", r.Gradients.Stopped)
	}
	if _, err := check.Check(context.Background(), m, sample, check.Options{Gradients: &check.Gradients{Loss: "mse", Targets: filepath.Join(dir, "missing.npy")}}); err == nil || !strings.Contains(err.Error(), "missing.npy") {
		t.Errorf("missing targets file: %v", err)
	}
	// 20 KiB: every tensor of the forward pass fits (the largest, the
	// input batch, is 32·64·4 = 8 KiB), the float64 gradients of all the
	// batch's values (the input alone 16 KiB) do not
	r, err = check.Check(context.Background(), m, sample, check.Options{MemoryBudget: 20 << 10, Gradients: &check.Gradients{}})
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(r.Gradients.Stopped, "memory budget") {
		t.Errorf("over budget: stopped %q", r.Gradients.Stopped)
	}
}

// deepRelu writes 9 Gemm+Relu layers of width 128 (no bias) on 128 inputs
// and a 10-class head, weights with Var[w] = gain/fan_out.
func deepRelu(t *testing.T, gain float64) string {
	r := rand.New(rand.NewSource(9))
	b := modelbuild.New("deep_relu", 13)
	b.Input("x", []int{1, 128}, true)
	prev := "x"
	for l := 1; l <= 10; l++ {
		out := 128
		if l == 10 {
			out = 10
		}
		w := make([]float32, out*128)
		for i := range w {
			w[i] = float32(r.NormFloat64() * math.Sqrt(gain/float64(out)))
		}
		b.Init(fmt.Sprintf("w%d", l), []int{out, 128}, w)
		prev = b.Node("Gemm", fmt.Sprintf("/fc%d/Gemm", l), []string{prev, fmt.Sprintf("w%d", l)}, []string{fmt.Sprintf("z%d", l)}, modelbuild.Attr{Name: "transB", Value: int64(1)})
		if l < 10 {
			prev = b.Node("Relu", fmt.Sprintf("/act%d/Relu", l), []string{prev}, []string{fmt.Sprintf("h%d", l)})
		}
	}
	b.Output(prev)
	path := filepath.Join(t.TempDir(), "deep_relu.onnx")
	if err := b.Write(path); err != nil {
		t.Fatal(err)
	}
	return path
}

// TestReluStackGradientRatio: He et al. 2015 (§2.2, backward case) predict
// the activation-gradient RMS of a ReLU stack to change by √(½·n̂·Var[w])
// per layer: with Var[w] = 8/fan_out that is ×2 per layer towards the input,
// 2⁸ = 256 over the 8 steps between the first and the ninth ReLU (past
// gradient-explosion's 1e2, which names the stack's spread-explosion as the
// forward-pass cause: fan_in = fan_out, the activations grow alike); with
// 0.5/fan_out it is 1/256 (gradient-vanishing, under 1e-2); with He's
// 2/fan_out neither fires. The measured ratio is within a factor 2 of 2⁸.
func TestReluStackGradientRatio(t *testing.T) {
	for _, c := range []struct {
		gain  float64
		check string
		want  float64
	}{{8, "gradient-explosion", 256}, {0.5, "gradient-vanishing", 1.0 / 256}, {2, "", 1}} {
		m := load(t, deepRelu(t, c.gain))
		r, err := check.Check(context.Background(), m, check.Sample{Samples: 256}, check.Options{Gradients: &check.Gradients{}})
		if err != nil {
			t.Fatal(err)
		}
		var got *report.Finding
		for i, f := range r.Findings {
			if f.Check == "gradient-explosion" || f.Check == "gradient-vanishing" {
				if got != nil {
					t.Errorf("gain %g: two gradient findings", c.gain)
				}
				got = &r.Findings[i]
			}
		}
		if c.check == "" {
			if got != nil {
				t.Errorf("gain 2: unexpected %s: %s", got.Check, got.Message)
			}
			continue
		}
		if got == nil || got.Check != c.check || got.Node != "/act1/Relu" {
			t.Fatalf("gain %g: finding %+v, want %s at /act1/Relu", c.gain, got, c.check)
		}
		ratio := got.Evidence["ratio"].(float64)
		if ratio < c.want/2 || ratio > c.want*2 {
			t.Errorf("gain %g: ratio %.4g, He et al. predict %.4g", c.gain, ratio, c.want)
		}
		if c.gain == 8 && !strings.Contains(got.Message, "spread-explosion") {
			t.Errorf("explosion does not name the forward spread: %s", got.Message)
		}
		t.Logf("gain %g: %s", c.gain, got.Message)
	}
}

// TestGradientsControlFlow: a Loop (loop_rnn) and an If (if_guard) read
// weights through their bodies, which have no gradient rule: each is listed
// as missing, the head above the Loop still has its gradient, and the
// weights given as Constant nodes (const_weights) are trainable parameters.
func TestGradientsControlFlow(t *testing.T) {
	for _, c := range []struct {
		model, missing string
		withGrad       []string
	}{
		{"loop_rnn", "Loop ", []string{"/head.weight"}},
		{"if_guard", "If ", nil},
		{"const_weights", "", []string{"fc1.weight", "fc2.weight"}},
	} {
		dir := "../testdata/controlflow/"
		r, err := check.Check(context.Background(), load(t, dir+c.model+".onnx"),
			check.Sample{Data: []string{dir + c.model + ".input.npy"}}, check.Options{Gradients: &check.Gradients{}})
		if err != nil {
			t.Fatal(err)
		}
		g := r.Gradients
		if c.missing == "" && len(g.Missing) != 0 || c.missing != "" && (len(g.Missing) != 1 || !strings.HasPrefix(g.Missing[0], c.missing)) {
			t.Errorf("%s: missing %q", c.model, g.Missing)
		}
		has := map[string]bool{}
		for _, w := range r.Weights {
			has[w.Name] = w.GradNorm != nil && *w.GradNorm > 0 && w.Norm != nil && *w.Norm > 0
		}
		for _, w := range c.withGrad {
			if !has[w] {
				t.Errorf("%s: %s has no gradient (weights %v)", c.model, w, has)
			}
		}
	}
}
