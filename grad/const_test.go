package grad

import (
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/internal/modeltest"
	"github.com/vitals-health/vitals/tensor"
)

// TestConstantNodeWeights: a weight given as a Constant node (reshaped into
// place) gets the same gradient as the same weight given as an initializer;
// its gradient is reported under the Constant's output name.
func TestConstantNodeWeights(t *testing.T) {
	r := rand.New(rand.NewSource(6))
	w := make([]float32, 4*6)
	for i := range w {
		w[i] = float32(r.NormFloat64())
	}
	x := make([]float32, 5*6)
	for i := range x {
		x[i] = float32(r.NormFloat64())
	}
	grads := map[string][]float64{}
	for _, asConst := range []bool{false, true} {
		b := modelbuild.New("w", 13)
		b.Input("x", []int{1, 6}, true)
		wname := "w"
		if asConst {
			b.Node("Constant", "/w", nil, []string{"wflat"}, modelbuild.Attr{Name: "value_floats", Value: w})
			b.Node("Constant", "/shape", nil, []string{"shape"}, modelbuild.Attr{Name: "value_ints", Value: []int64{4, 6}})
			b.Node("Reshape", "/reshape", []string{"wflat", "shape"}, []string{"w"})
			wname = "wflat"
		} else {
			b.Init("w", []int{4, 6}, w)
		}
		b.Node("Gemm", "/fc", []string{"x", "w"}, []string{"y"}, modelbuild.Attr{Name: "transB", Value: int64(1)})
		b.Output("y")
		tape, out := runBatch(t, modeltest.Model(t, b), tensor.From(x, 5, 6))
		loss, seed, err := CrossEntropy(out, []int64{0, 1, 2, 3, 0}, false)
		if err != nil {
			t.Fatal(err)
		}
		acc := NewAccumulator()
		if err := acc.Add(tape, "y", loss, seed, 5); err != nil {
			t.Fatal(err)
		}
		grads[wname] = acc.Param(wname)
	}
	a, c := grads["w"], grads["wflat"]
	if a == nil || c == nil || len(a) != len(c) {
		t.Fatalf("gradients %v / %v", a, c)
	}
	for i := range a {
		if math.Abs(a[i]-c[i]) > 1e-12 {
			t.Fatalf("element %d: initializer %g, Constant %g", i, a[i], c[i])
		}
	}
}
