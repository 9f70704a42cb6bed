package main

import (
	"encoding/json"
	"math"
	"testing"
)

// Activation storage recycled between batches must never be reused while a
// value is alive: the residual CNN (skip connections, tensors above the pool's
// minimum size) run one sample per batch, so every batch after the first runs
// on recycled buffers, must give the statistics of one batch of all three
// samples (reference model and input from testdata/ref, made with torch 1.13),
// and so must the batches chosen without --batch (one sample, then the rest).
func TestRecycledStorageGivesSameStatistics(t *testing.T) {
	type layer struct {
		Node                string
		Count               int64
		Mean, Std, Min, Max *float64
		DeadFraction        *float64 `json:"dead_fraction"`
	}
	run := func(batch string) []layer {
		args := []string{"check", "../../testdata/ref/resnet_tiny.onnx", "--data", "../../testdata/ref/resnet_tiny.input.npy", "--format", "json"}
		if batch != "" {
			args = append(args, "--batch", batch)
		}
		code, out, stderr := runCLI(t, args...)
		if code > 1 {
			t.Fatalf("batch %s: exit %d: %s", batch, code, stderr)
		}
		var r struct{ Layers []layer }
		if err := json.Unmarshal([]byte(out), &r); err != nil {
			t.Fatal(err)
		}
		return r.Layers
	}
	one, all, auto := run("1"), run("3"), run("")
	if len(one) != len(all) || len(auto) != len(all) || len(one) == 0 {
		t.Fatalf("%d, %d and %d layers", len(one), len(all), len(auto))
	}
	near := func(a, b *float64) bool {
		if a == nil || b == nil {
			return a == b
		}
		return math.Abs(*a-*b) <= 1e-5*math.Max(1, math.Max(math.Abs(*a), math.Abs(*b)))
	}
	for i := range one {
		a, b := one[i], all[i]
		if a.Count != b.Count || !near(a.Mean, b.Mean) || !near(a.Std, b.Std) || !near(a.Min, b.Min) || !near(a.Max, b.Max) || !near(a.DeadFraction, b.DeadFraction) {
			t.Errorf("%s: batch 1 %+v vs batch 3 %+v", a.Node, a, b)
		}
		if c := auto[i]; c.Count != b.Count || !near(c.Mean, b.Mean) || !near(c.Std, b.Std) || !near(c.Min, b.Min) || !near(c.Max, b.Max) || !near(c.DeadFraction, b.DeadFraction) {
			t.Errorf("%s: chosen batches %+v vs batch 3 %+v", c.Node, c, b)
		}
	}
}
