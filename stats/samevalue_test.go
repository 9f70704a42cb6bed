package stats

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/internal/modeltest"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// Layers that pass their input's values on unchanged (Identity of the
// model input, Transpose of a Relu, Flatten, Unsqueeze, Squeeze, Identity)
// take their batch statistics from that input instead of reading the values
// again. Over batches that widen the histogram's grid, and an all-zero
// batch, every layer's counts, grid, extremes and zero counts are exactly
// those of a collector that computes everything (the reference here is the
// plain computation), and so are the moments before the Transpose; after it
// the plain computation sums the values in another order, so mean and M2
// agree to 1e-12 relative.
func TestSameValueLayersReuseExactly(t *testing.T) {
	b := modelbuild.New("same", 11)
	b.Input("x", []int{1, 4, 6}, true)
	b.Node("Identity", "id0", []string{"x"}, []string{"a"})
	b.Node("Relu", "relu", []string{"a"}, []string{"r"})
	b.Node("Transpose", "tr", []string{"r"}, []string{"rt"}, modelbuild.Attr{Name: "perm", Value: []int64{0, 2, 1}})
	b.Node("Flatten", "flat", []string{"rt"}, []string{"f"}, modelbuild.Attr{Name: "axis", Value: 1})
	b.Node("Unsqueeze", "unsq", []string{"f"}, []string{"u"}, modelbuild.Attr{Name: "axes", Value: []int64{1}})
	b.Node("Squeeze", "sq", []string{"u"}, []string{"s"}, modelbuild.Attr{Name: "axes", Value: []int64{1}})
	b.Node("Identity", "id1", []string{"s"}, []string{"y"})
	b.Output("y")
	m, p := BuildPlan(t, b)
	reuse, plain := NewCollector(m, p), NewCollector(m, p)
	for _, la := range plain.layers {
		la.sameAs = nil
	}
	runBatches(t, p, wideningBatches(rand.New(rand.NewPCG(9, 10)), -1), reuse, plain)
	if n := reuse.reused.Load(); n != 6*6 {
		t.Fatalf("%d batch results reused, want 36 (6 layers × 6 batches)", n)
	}
	reordered := false
	for i, la := range reuse.layers {
		want := plain.layers[i]
		reordered = reordered || la.node.OpType == "Transpose"
		mom := la.mom
		if reordered {
			if math.Abs(mom.Mean-want.mom.Mean) > 1e-12*math.Abs(want.mom.Mean) || math.Abs(mom.M2-want.mom.M2) > 1e-12*want.mom.M2 {
				t.Fatalf("%s: mean %g M2 %g, want %g %g", la.output, mom.Mean, mom.M2, want.mom.Mean, want.mom.M2)
			}
			mom.Mean, mom.M2 = want.mom.Mean, want.mom.M2
		}
		sameAccumulators(t, la, want, mom)
	}
}

// wideningBatches returns six [5, 4, 6] batches of scaled Gaussian values
// whose range widens the histogram's grid (one all zero); a NaN goes into
// the fourth at index nanAt (none when negative).
func wideningBatches(rng *rand.Rand, nanAt int) []*tensor.Tensor {
	var xs []*tensor.Tensor
	for k, scale := range []float32{1, 0, 0.5, 8, 3, 1000} {
		x := tensor.New(tensor.Float32, []int{5, 4, 6})
		for i := range x.F32() {
			x.F32()[i] = scale * float32(rng.NormFloat64()+0.3*float64(k))
		}
		if k == 3 && nanAt >= 0 {
			x.F32()[nanAt] = float32(math.NaN())
		}
		xs = append(xs, x)
	}
	return xs
}

// runBatches runs every batch (graph input "x") through p into each
// collector.
func runBatches(t *testing.T, p *probe.Plan, xs []*tensor.Tensor, cs ...*Collector) {
	t.Helper()
	for _, x := range xs {
		for _, c := range cs {
			in := map[string]*tensor.Tensor{"x": x}
			c.AddInputs(in)
			if _, err := p.Run(in, c.Hook); err != nil {
				t.Fatal(err)
			}
			if err := c.Wait(); err != nil {
				t.Fatal(err)
			}
		}
	}
}

// sameAccumulators fails unless la's moments (mom, la's own with any
// tolerated difference already replaced), histogram grid, range and counts
// are want's.
func sameAccumulators(t *testing.T, la, want *layerAcc, mom Moments) {
	t.Helper()
	if mom != want.mom || la.hist.Exp != want.hist.Exp || la.hist.Start != want.hist.Start ||
		la.hist.Min != want.hist.Min || la.hist.Max != want.hist.Max || len(la.hist.Counts) != len(want.hist.Counts) {
		t.Fatalf("%s: moments %+v grid %d/%d, want %+v %d/%d", la.output, la.mom, la.hist.Exp, la.hist.Start, want.mom, want.hist.Exp, want.hist.Start)
	}
	for k := range la.hist.Counts {
		if la.hist.Counts[k] != want.hist.Counts[k] {
			t.Fatalf("%s: bin %d has %d, want %d", la.output, k, la.hist.Counts[k], want.hist.Counts[k])
		}
	}
}

// BuildPlan serialises, decodes and compiles a built model, failing the test
// on an error (exported for the package's external tests too).
func BuildPlan(t testing.TB, b *modelbuild.Builder) (*loader.Model, *probe.Plan) {
	t.Helper()
	m := modeltest.Model(t, b)
	p, err := probe.Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	return m, p
}

// LoadPlan loads and compiles the model file at path, failing the test on an
// error (exported for the package's external tests too).
func LoadPlan(t testing.TB, path string) (*loader.Model, *probe.Plan) {
	t.Helper()
	m, err := loader.LoadModel(path)
	if err != nil {
		t.Fatal(err)
	}
	p, err := probe.Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	return m, p
}
