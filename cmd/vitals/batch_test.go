package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// A model exported with a fixed batch size (the first axis a number, as
// exporters write it without a dynamic batch axis; here 4, with a Reshape
// whose target shape holds that 4 too) runs in batches of exactly that size
// when --batch is left out; the samples that fall short of a last full
// batch are left out with a note, a different --batch is refused naming the
// input, and too few samples for one batch is an error.
func TestFixedBatchModel(t *testing.T) {
	dir := t.TempDir()
	b := modelbuild.New("fixed", 13)
	b.Input("x", []int{4, 6}, false)
	w := make([]float32, 6*5)
	for i := range w {
		w[i] = float32(i%7) - 3
	}
	b.Init("w", []int{6, 5}, w)
	b.Node("MatMul", "mm", []string{"x", "w"}, []string{"h"})
	b.Node("Relu", "relu", []string{"h"}, []string{"r"})
	b.Node("Constant", "shape", nil, []string{"s"}, modelbuild.Attr{Name: "value_ints", Value: []int64{4, 5, 1}})
	b.Node("Reshape", "reshape", []string{"r", "s"}, []string{"y"})
	b.Output("y")
	model := filepath.Join(dir, "fixed.onnx")
	if err := b.Write(model); err != nil {
		t.Fatal(err)
	}
	sample := func(n int) string { return rampNpy(t, filepath.Join(dir, "x.npy"), 11, 5, n, 6) }
	code, out, stderr := runCLI(t, "check", model, "--data", sample(10), "--format", "json")
	if code > 1 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var r struct {
		Input  struct{ Samples int }
		Layers []struct {
			Node  string
			Count int64
		}
	}
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatal(err)
	}
	if r.Input.Samples != 8 {
		t.Errorf("%d samples used, want 8 (two batches of 4)", r.Input.Samples)
	}
	for _, l := range r.Layers {
		if l.Node == "relu" && l.Count != 8*5 {
			t.Errorf("relu observed %d values, want 40", l.Count)
		}
	}
	if !strings.Contains(stderr, "batch size to 4") || !strings.Contains(stderr, "last 2 samples") {
		t.Errorf("no note on the samples left out: %q", stderr)
	}
	code, _, stderr = runCLI(t, "check", model, "--data", sample(10), "--batch", "3")
	if code != 2 || !strings.Contains(stderr, `input "x"`) || !strings.Contains(stderr, "--batch 4") {
		t.Errorf("--batch 3: exit %d, %q", code, stderr)
	}
	code, _, stderr = runCLI(t, "check", model, "--data", sample(3))
	if code != 2 || !strings.Contains(stderr, "only 3 samples") {
		t.Errorf("3 samples: exit %d, %q", code, stderr)
	}
	if strings.Contains(stderr, "dynamic batch axis") {
		t.Errorf("batch 4: hint meant for batch 1 given: %q", stderr)
	}
	// a model fixed to one sample a batch runs, one at a time, with a hint
	one := modelbuild.New("fixed1", 13)
	one.Input("x", []int{1, 6}, false)
	one.Init("w", []int{6, 5}, w)
	one.Node("MatMul", "mm", []string{"x", "w"}, []string{"h"})
	one.Output("h")
	model1 := filepath.Join(dir, "fixed1.onnx")
	if err := one.Write(model1); err != nil {
		t.Fatal(err)
	}
	code, out, stderr = runCLI(t, "check", model1, "--data", sample(3), "--format", "json")
	if code > 1 || !strings.Contains(stderr, "dynamic batch axis") || !strings.Contains(out, `"samples": 3`) {
		t.Errorf("batch 1: exit %d, stderr %q", code, stderr)
	}
}

// A model whose input has no sample axis ([3, 4, 4], as detection models
// exported for one image take it) runs one sample a run with the axis
// dropped: all 5 samples are seen, the input statistics keep their channel
// axis, and a --batch above 1 is refused naming the input.
func TestUnbatchedInput(t *testing.T) {
	dir := t.TempDir()
	b := modelbuild.New("unbatched", 13)
	b.Input("x", []int{3, 4, 4}, false)
	w := make([]float32, 2*3)
	for i := range w {
		w[i] = float32(i) - 2.5
	}
	b.Init("w", []int{2, 3, 1, 1}, w)
	b.Node("Constant", "axes", nil, []string{"axes"}, modelbuild.Attr{Name: "value_ints", Value: []int64{0}})
	b.Node("Unsqueeze", "batch", []string{"x", "axes"}, []string{"xb"})
	b.Node("Conv", "conv", []string{"xb", "w"}, []string{"c"})
	b.Node("Relu", "relu", []string{"c"}, []string{"y"})
	b.Output("y")
	model := filepath.Join(dir, "unbatched.onnx")
	if err := b.Write(model); err != nil {
		t.Fatal(err)
	}
	data := rampNpy(t, filepath.Join(dir, "x.npy"), 13, 4, 5, 3, 4, 4)
	code, out, stderr := runCLI(t, "check", model, "--data", data, "--format", "json")
	if code > 1 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	var r struct {
		Input struct {
			Samples  int
			PerInput []struct {
				ChannelMean []float64 `json:"channel_mean"`
			} `json:"per_input"`
		}
		Layers []struct {
			Node  string
			Count int64
		}
	}
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatal(err)
	}
	if r.Input.Samples != 5 || len(r.Input.PerInput) != 1 || len(r.Input.PerInput[0].ChannelMean) != 3 {
		t.Errorf("samples %d, per input %+v: want 5 samples and 3 channel means", r.Input.Samples, r.Input.PerInput)
	}
	for _, l := range r.Layers {
		if l.Node == "relu" && l.Count != 5*2*4*4 {
			t.Errorf("relu observed %d values, want %d", l.Count, 5*2*4*4)
		}
	}
	if strings.Contains(stderr, "dynamic batch axis") {
		t.Errorf("batch-1 hint given for a model without a sample axis: %q", stderr)
	}
	code, _, stderr = runCLI(t, "check", model, "--data", data, "--batch", "2")
	if code != 2 || !strings.Contains(stderr, `input "x"`) || !strings.Contains(stderr, "no sample axis") {
		t.Errorf("--batch 2: exit %d, %q", code, stderr)
	}
}

// rampNpy writes a float32 .npy of the given shape holding (i mod period)/div
// for element i, and returns its path.
func rampNpy(t *testing.T, path string, period, div int, shape ...int) string {
	t.Helper()
	x := tensor.New(tensor.Float32, shape)
	for i := range x.F32() {
		x.F32()[i] = float32(i%period) / float32(div)
	}
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if err := loader.WriteNpy(f, x); err != nil {
		t.Fatal(err)
	}
	return path
}

// --fixed and --carry reach the run: a streaming model
// (state' = 0.5·state + x, state [1, batch, 4]) over 6 frames of a natural
// [N, 4] file, with its state carried from frame to frame and a scalar gain
// fixed, reports every frame; leaving the state out names both flags.
func TestFixedAndCarryFlags(t *testing.T) {
	dir := t.TempDir()
	b := modelbuild.New("stream", 13)
	b.InputOf("x", 1, []int{-1, 4}, map[int]string{0: "batch"})
	b.InputOf("gain", 1, []int{}, nil)
	b.InputOf("state", 1, []int{1, -1, 4}, map[int]string{1: "batch"})
	b.Node("Mul", "decay", []string{"state", "gain"}, []string{"sa"})
	b.Node("Add", "add", []string{"sa", "x"}, []string{"state_out"})
	b.Output("state_out")
	model := filepath.Join(dir, "stream.onnx")
	if err := b.Write(model); err != nil {
		t.Fatal(err)
	}
	frames := rampNpy(t, filepath.Join(dir, "frames.npy"), 9, 2, 6, 4)
	code, out, stderr := runCLI(t, "check", model, "--data", frames, "--fixed", "gain=0.5", "--carry", "state_out=state", "--format", "json")
	if code > 1 || !strings.Contains(out, `"samples": 6`) {
		t.Errorf("exit %d, stderr %q", code, stderr)
	}
	code, _, stderr = runCLI(t, "check", model, "--data", "x="+frames, "--fixed", "gain=0.5")
	if code != 2 || !strings.Contains(stderr, "--data state=FILE") || !strings.Contains(stderr, "--fixed state=FILE|VALUE|zeros") {
		t.Errorf("state left out: exit %d, stderr %q", code, stderr)
	}
}
