package check

import (
	"context"
	"sync/atomic"
	"testing"
)

// A run recycles activation storage within a batch (a value whose last
// reader has run goes back to the run's pool once the statistics worker has
// passed it): on the residual CNN from testdata/ref (torch 1.13 export), whose
// activations are above the pool's minimum size, some values must come back.
// The reference tests in package stats run the same path and compare its
// statistics with torch's, so storage reused too early would show there.
func TestRunRecyclesWithinBatch(t *testing.T) {
	m, err := Load("../testdata/ref/resnet_tiny.onnx", LoadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var n atomic.Int64
	o := Options{recycled: &n}
	if _, err := Check(context.Background(), m, Sample{Data: []string{"../testdata/ref/resnet_tiny.input.npy"}, Batch: 3}, o); err != nil {
		t.Fatal(err)
	}
	if n.Load() == 0 {
		t.Error("no activation storage was recycled within a batch")
	}
	t.Logf("%d values recycled within a batch", n.Load())
}
