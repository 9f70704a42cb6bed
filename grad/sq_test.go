package grad

import (
	"math"
	"path/filepath"
	"testing"

	"github.com/vitals-health/vitals/loader"
)

// TestBackwardSqSameAsSums: the Σ g² that the Relu, BatchNormalization and
// Conv rules take while reading g (BackwardSq) equal Σ g² summed over the
// gradients Backward hands out, for every node output of resnet_tiny
// (float32 Conv/BN/ReLU stack with residual Adds), and both passes give
// the same dL/dW. Reference: the plain sum over the buffer (sumSq); they
// differ only by the order of additions, relative 1e-12 (common practice
// for float64 sums of a few 10⁵ positive terms).
func TestBackwardSqSameAsSums(t *testing.T) {
	dir := refDir(t)
	m, err := loader.LoadModel(filepath.Join(dir, "resnet_tiny.onnx"))
	if err != nil {
		t.Fatal(err)
	}
	x, err := loader.ReadNpy(filepath.Join(dir, "resnet_tiny.input.npy"))
	if err != nil {
		t.Fatal(err)
	}
	tape, out := runBatch(t, m, x)
	labels := make([]int64, out.Shape[0])
	_, seed, err := CrossEntropy(out, labels, false)
	if err != nil {
		t.Fatal(err)
	}
	name := m.Graph.Outputs[0].Name
	want := map[string]float64{}
	ref, err := tape.Backward(map[string][]float64{name: seed}, func(_ int, v string, g []float64) {
		want[v] = sumSq(g)
	})
	if err != nil {
		t.Fatal(err)
	}
	got := map[string]float64{}
	sizes := map[string]int{}
	res, err := tape.BackwardSq(map[string][]float64{name: seed}, func(_ int, v string, n int, s float64) {
		got[v] = s
		sizes[v] = n
	})
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != len(want) || len(want) < 10 {
		t.Fatalf("BackwardSq reported %d values, Backward %d", len(got), len(want))
	}
	for v, w := range want {
		if math.Abs(got[v]-w) > 1e-12*w {
			t.Errorf("%s: Σg² %.17g, want %.17g", v, got[v], w)
		}
		if sizes[v] != tape.Value(v).Size() {
			t.Errorf("%s: size %d, value has %d", v, sizes[v], tape.Value(v).Size())
		}
	}
	for p, g := range ref.Params {
		h := res.Params[p]
		if len(h) != len(g) {
			t.Fatalf("%s: %d gradient elements, want %d", p, len(h), len(g))
		}
		for i := range g {
			if h[i] != g[i] {
				t.Fatalf("%s[%d]: %g, Backward gives %g", p, i, h[i], g[i])
			}
		}
	}
}

// TestFreeListFit: a recycled buffer serves a request of its own size or
// one up to fitSlack times smaller, cleared by get, and goes back whole.
func TestFreeListFit(t *testing.T) {
	f := &freeList{byLen: map[int][][]float64{}}
	b := make([]float64, 100)
	for i := range b {
		b[i] = 1
	}
	f.put(b)
	if c := f.get(10); &c[0] == &b[0] {
		t.Fatal("a buffer 10 times larger than the request was reused")
	}
	c := f.get(40)
	if len(c) != 40 || &c[0] != &b[0] {
		t.Fatalf("request of 40: len %d, reused %v", len(c), &c[0] == &b[0])
	}
	for i, v := range c {
		if v != 0 {
			t.Fatalf("element %d not cleared: %g", i, v)
		}
	}
	f.put(c)
	if d := f.getRaw(100); len(d) != 100 || &d[0] != &b[0] || d[99] != 1 {
		t.Fatalf("the buffer did not go back whole")
	}
}
