package check_test

import (
	"context"
	"math"
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

// Known answers in this file are computed here, in float64, from the
// values written to the sample files (independently of the executor and
// the statistics code); the models are built with internal/modelbuild.

func compile(t *testing.T, b *modelbuild.Builder) *check.Model {
	t.Helper()
	m, err := check.Compile(modeltest.Model(t, b), check.LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	return m
}

func writeNpy(t *testing.T, dir, name string, x *tensor.Tensor) string {
	t.Helper()
	path := filepath.Join(dir, name)
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

func layer(t *testing.T, r *report.Report, node string) report.Layer {
	t.Helper()
	for _, l := range r.Layers {
		if l.Node == node {
			return l
		}
	}
	t.Fatalf("no layer %q in the report", node)
	return report.Layer{}
}

// wantStats compares a layer's count, mean, min and max with values
// computed here.
func wantStats(t *testing.T, what string, l report.Layer, vals []float64) {
	t.Helper()
	sum, lo, hi := 0.0, math.Inf(1), math.Inf(-1)
	for _, v := range vals {
		sum += v
		lo, hi = min(lo, v), max(hi, v)
	}
	mean := sum / float64(len(vals))
	if l.Count != int64(len(vals)) || l.Mean == nil || math.Abs(*l.Mean-mean) > 1e-6*max(1, math.Abs(mean)) || *l.Min != lo || *l.Max != hi {
		t.Errorf("%s: count %d mean %v min %v max %v; want %d, %g, %g, %g", what, l.Count, deref(l.Mean), deref(l.Min), deref(l.Max), len(vals), mean, lo, hi)
	}
}

func deref(p *float64) any {
	if p == nil {
		return nil
	}
	return *p
}

// A model with a per-sample input x [batch, 3], a scalar int64 input sr (a
// sample rate, as voice-activity detectors take it) and a state input
// [2, batch, 3] whose batch axis is the second: y = Relu(state + x·sr).
// Fed naturally (--data x.npy, --fixed sr=2, --fixed state=FILE|zeros) in
// batches of 4 (4, 4, 2 for 10 samples), the Relu's statistics are those of
// relu(state[j, h] + 2·x[n, h]) over every j, n, h.
func TestFixedScalarAndStateInputs(t *testing.T) {
	const N, H = 10, 3
	b := modelbuild.New("fixed", 13)
	b.InputOf("x", 1, []int{-1, H}, map[int]string{0: "batch"})
	b.InputOf("sr", 7, []int{}, nil)
	b.InputOf("state", 1, []int{2, -1, H}, map[int]string{1: "batch"})
	b.Node("Cast", "cast", []string{"sr"}, []string{"srf"}, modelbuild.Attr{Name: "to", Value: int64(1)})
	b.Node("Mul", "scale", []string{"x", "srf"}, []string{"xs"})
	b.Node("Add", "add", []string{"state", "xs"}, []string{"s"})
	b.Node("Relu", "relu", []string{"s"}, []string{"y"})
	b.Output("y")
	m := compile(t, b)
	dir := t.TempDir()
	x := tensor.New(tensor.Float32, []int{N, H})
	for i := range x.F32() {
		x.F32()[i] = float32(i%7) - 3
	}
	xf := writeNpy(t, dir, "x.npy", x)
	st := tensor.New(tensor.Float32, []int{2, 1, H})
	for i := range st.F32() {
		st.F32()[i] = float32(i) - 2.5 // j·3 + h − 2.5
	}
	withAxis := writeNpy(t, dir, "state.npy", st)
	noAxis := writeNpy(t, dir, "state2.npy", st.Reshaped([]int{2, H}))
	want := func(state func(j, h int) float64) []float64 {
		var v []float64
		for j := 0; j < 2; j++ {
			for n := 0; n < N; n++ {
				for h := 0; h < H; h++ {
					v = append(v, max(0, state(j, h)+2*float64(x.F32()[n*H+h])))
				}
			}
		}
		return v
	}
	fromFile := func(j, h int) float64 { return float64(j*H+h) - 2.5 }
	for _, c := range []struct {
		what  string
		state string
		value func(j, h int) float64
	}{
		{"state with a batch axis of 1", withAxis, fromFile},
		{"state without the batch axis", noAxis, fromFile},
		{"state zeros", "zeros", func(int, int) float64 { return 0 }},
	} {
		s := check.Sample{Data: []string{xf}, Fixed: []string{"sr=2", "state=" + c.state}, Batch: 4}
		r, err := check.Check(context.Background(), m, s, check.Options{})
		if err != nil {
			t.Fatalf("%s: %v", c.what, err)
		}
		if r.Input.Samples != N {
			t.Errorf("%s: %d samples, want %d", c.what, r.Input.Samples, N)
		}
		wantStats(t, c.what, layer(t, r, "relu"), want(c.value))
		// the unnamed --data file fed x alone; a fixed file is named too
		for _, in := range r.Input.PerInput {
			wantPath := map[string]string{"x": xf, "sr": "", "state": c.state}[in.Name]
			if wantPath == "zeros" {
				wantPath = ""
			}
			if in.Path != wantPath {
				t.Errorf("%s: input %q from %q, want %q", c.what, in.Name, in.Path, wantPath)
			}
		}
	}
}

// A per-sample input whose batch axis is the second ([T, batch, F], as
// sequence models exported time-major take it) is fed from a file of
// samples [N, T, F]: each batch's samples are moved to axis 1. The product
// with a weight w[T, 1, F] that differs along T and F has the statistics
// of file[n, t, f]·w[t, f] only when every value lands where it belongs.
func TestDataBatchAxisNotFirst(t *testing.T) {
	const N, T, F = 7, 3, 2
	b := modelbuild.New("timemajor", 13)
	b.InputOf("z", 1, []int{T, -1, F}, map[int]string{1: "batch"})
	w := []float32{1, -2, 3, 0.5, -1, 4}
	b.Init("w", []int{T, 1, F}, w)
	b.Node("Mul", "mul", []string{"z", "w"}, []string{"p"})
	b.Output("p")
	m := compile(t, b)
	z := tensor.New(tensor.Float32, []int{N, T, F})
	for i := range z.F32() {
		z.F32()[i] = float32(i%11) - 4
	}
	zf := writeNpy(t, t.TempDir(), "z.npy", z)
	var vals []float64
	for n := 0; n < N; n++ {
		for i := 0; i < T*F; i++ {
			vals = append(vals, float64(z.F32()[n*T*F+i])*float64(w[i]))
		}
	}
	r, err := check.Check(context.Background(), m, check.Sample{Data: []string{zf}, Batch: 3}, check.Options{})
	if err != nil {
		t.Fatal(err)
	}
	wantStats(t, "time-major product", layer(t, r, "mul"), vals)
	if got := layer(t, r, "mul").Shape; len(got) != 3 || got[0] != T || got[1] != 3 || got[2] != F {
		t.Errorf("first batch's output shape %v, want [%d 3 %d]", got, T, F)
	}
}

// A streaming model: state' = 0.5·state + x, its state output fed back as
// the next frame's state input (--carry), frames in file order. The Add's
// statistics are those of s_t = 0.5·s_{t−1} + x_t over every frame, the
// recurrence computed here, from zeros and from a given first state.
func TestCarryStreamingState(t *testing.T) {
	const N, H = 9, 4
	b := modelbuild.New("stream", 13)
	b.InputOf("x", 1, []int{-1, H}, map[int]string{0: "batch"})
	b.InputOf("state", 1, []int{1, -1, H}, map[int]string{1: "batch"})
	b.Init("a", []int{1}, []float32{0.5})
	b.Node("Mul", "decay", []string{"state", "a"}, []string{"sa"})
	b.Node("Add", "add", []string{"sa", "x"}, []string{"state_out"})
	b.Output("state_out")
	m := compile(t, b)
	dir := t.TempDir()
	x := tensor.New(tensor.Float32, []int{N, H})
	for i := range x.F32() {
		x.F32()[i] = float32((i*5)%9) - 4
	}
	xf := writeNpy(t, dir, "frames.npy", x)
	s0 := tensor.From([]float32{8, -8, 1, 0}, 1, 1, H)
	s0f := writeNpy(t, dir, "s0.npy", s0)
	recurrence := func(start []float64) []float64 {
		s := append([]float64{}, start...)
		var all []float64
		for n := 0; n < N; n++ {
			for h := range s {
				s[h] = 0.5*s[h] + float64(x.F32()[n*H+h])
			}
			all = append(all, s...)
		}
		return all
	}
	for _, c := range []struct {
		what  string
		fixed []string
		start []float64
	}{
		{"from zeros", nil, []float64{0, 0, 0, 0}},
		{"from a given state", []string{"state=" + s0f}, []float64{8, -8, 1, 0}},
	} {
		s := check.Sample{Data: []string{"x=" + xf}, Fixed: c.fixed, Carry: []string{"state_out=state"}}
		r, err := check.Check(context.Background(), m, s, check.Options{})
		if err != nil {
			t.Fatalf("%s: %v", c.what, err)
		}
		wantStats(t, "carried state "+c.what, layer(t, r, "add"), recurrence(c.start))
	}
	// without --carry every frame starts from zeros: a different answer,
	// which the test above would catch
	r, err := check.Check(context.Background(), m, check.Sample{Data: []string{xf}, Fixed: []string{"state=zeros"}, Batch: 1}, check.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if l := layer(t, r, "add"); l.Mean != nil && math.Abs(*l.Mean-mean(recurrence([]float64{0, 0, 0, 0}))) < 1e-6 {
		t.Error("the state was carried without --carry")
	}
	// carrying forces one sample a batch
	_, err = check.Check(context.Background(), m, check.Sample{Data: []string{xf}, Carry: []string{"state_out=state"}, Batch: 4}, check.Options{})
	if err == nil || !strings.Contains(err.Error(), "--carry state_out=state") || !strings.Contains(err.Error(), "--batch 1") {
		t.Errorf("--carry with --batch 4: %v", err)
	}
}

func mean(v []float64) float64 {
	s := 0.0
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

// Inputs left out are named with both ways to give them; a fixed value or
// a sample of the wrong shape names the input, both shapes and the flag.
func TestFixedAndDataErrors(t *testing.T) {
	const H = 3
	b := modelbuild.New("errs", 13)
	b.InputOf("x", 1, []int{-1, H}, map[int]string{0: "batch"})
	b.InputOf("sr", 7, []int{}, nil)
	b.InputOf("state", 1, []int{2, -1, H}, map[int]string{1: "batch"})
	b.Node("Add", "add", []string{"state", "x"}, []string{"s"})
	b.Output("s")
	m := compile(t, b)
	dir := t.TempDir()
	xf := writeNpy(t, dir, "x.npy", tensor.New(tensor.Float32, []int{5, H}))
	wide := writeNpy(t, dir, "wide.npy", tensor.New(tensor.Float32, []int{5, H + 1}))
	st3 := writeNpy(t, dir, "st3.npy", tensor.New(tensor.Float32, []int{2, 3, H}))
	for _, c := range []struct {
		sample check.Sample
		want   []string
	}{
		{check.Sample{Data: []string{"x=" + xf}}, []string{`"sr"`, `"state"`, "--data sr=FILE", "--fixed sr=FILE|VALUE|zeros", "--fixed state=FILE|VALUE|zeros", "[2 batch 3]"}},
		{check.Sample{Data: []string{xf}}, []string{"sr []", "state [2 batch 3]", "INPUT=PATH", "--fixed NAME=FILE|VALUE|zeros"}},
		{check.Sample{Data: []string{xf}, Fixed: []string{"sr=16000", "state=" + st3}}, []string{`input "state"`, "[2 batch 3]", "[2 3 3]", "--fixed state="}},
		{check.Sample{Data: []string{"x=" + wide}, Fixed: []string{"sr=16000", "state=zeros"}}, []string{`input "x"`, "[batch 3]", "[4]", "--data x=FILE", "[3]"}},
		{check.Sample{Data: []string{xf}, Fixed: []string{"sr=1.5", "state=zeros"}}, []string{`"sr"`, "int64", "whole number"}},
		{check.Sample{Data: []string{xf}, Fixed: []string{"rate=1", "state=zeros"}}, []string{`"rate" is not an input`}},
	} {
		_, err := check.Check(context.Background(), m, c.sample, check.Options{})
		for _, w := range c.want {
			if err == nil || !strings.Contains(err.Error(), w) {
				t.Errorf("data %v fixed %v: error %v, want it to contain %q", c.sample.Data, c.sample.Fixed, err, w)
			}
		}
	}
}
