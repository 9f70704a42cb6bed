package stats

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
)

// A Concat of observed layers takes its statistics from them (concat.go):
// over batches that widen the histogram's grid, with a NaN and an all-zero
// batch, its counts, grid, histogram, extremes, zero and non-finite counts
// are exactly those of a collector that reads the Concat's own values
// (the reference here, deriveConcats off; the NaN reaches it through
// both inputs), its mean and M2 agree to 1e-12
// relative (merged in another order), and so do the per-channel moments of
// a concatenation along the channels that feeds a BatchNormalization. Not
// derived: a Concat with a graph input among its inputs, and one whose
// values a Flatten reuses batch by batch.
func TestConcatMergedFromParts(t *testing.T) {
	b := modelbuild.New("concat", 13)
	b.Input("x", []int{1, 4, 6}, true)
	b.Node("Relu", "relu", []string{"x"}, []string{"a"})
	b.Node("Sigmoid", "sig", []string{"x"}, []string{"s"})
	b.Node("Concat", "cat", []string{"a", "s"}, []string{"c"}, modelbuild.Attr{Name: "axis", Value: 1})
	for _, p := range []string{"scale", "bias", "mean", "var"} {
		v := make([]float32, 8)
		for i := range v {
			v[i] = 0.5 + float32(i)/8
		}
		b.Init(p, []int{8}, v)
	}
	b.Node("BatchNormalization", "bn", []string{"c", "scale", "bias", "mean", "var"}, []string{"n"})
	b.Node("Concat", "withx", []string{"n", "x"}, []string{"cx"}, modelbuild.Attr{Name: "axis", Value: 1})
	b.Node("Concat", "cat3", []string{"c", "c"}, []string{"c3"}, modelbuild.Attr{Name: "axis", Value: 2})
	b.Node("Flatten", "flat", []string{"c3"}, []string{"f"}, modelbuild.Attr{Name: "axis", Value: 1})
	b.Output("cx")
	b.Output("f")
	m, p := BuildPlan(t, b)
	merged := NewCollector(m, p)
	deriveConcats = false
	plain := NewCollector(m, p)
	deriveConcats = true
	derived := map[string]bool{}
	for _, la := range merged.layers {
		if la.parts != nil {
			derived[la.node.Name] = true
		}
	}
	if !derived["cat"] || derived["withx"] || derived["cat3"] || len(derived) != 1 {
		t.Fatalf("derived Concat layers %v, want cat alone", derived)
	}
	runBatches(t, p, wideningBatches(rand.New(rand.NewPCG(11, 12)), 7), merged, plain)
	merged.mergeConcats()
	close := func(a, b float64) bool { return a == b || math.Abs(a-b) <= 1e-12*math.Max(math.Abs(a), math.Abs(b)) }
	for i, la := range merged.layers {
		want := plain.layers[i]
		mom := la.mom
		if !close(mom.Mean, want.mom.Mean) || !close(mom.M2, want.mom.M2) {
			t.Fatalf("%s: mean %g M2 %g, want %g %g", la.output, mom.Mean, mom.M2, want.mom.Mean, want.mom.M2)
		}
		mom.Mean, mom.M2 = want.mom.Mean, want.mom.M2
		sameAccumulators(t, la, want, mom)
		if la.output == "c" {
			if mom.Nonfinite != 2 || len(la.perChan) != 8 || len(want.perChan) != 8 || fmt.Sprint(la.shape) != fmt.Sprint(want.shape) {
				t.Fatalf("c: %d non-finite, %d and %d channels, shape %v and %v", mom.Nonfinite, len(la.perChan), len(want.perChan), la.shape, want.shape)
			}
			for ch, pm := range la.perChan {
				w := want.perChan[ch]
				if pm.N != w.N || pm.Nonfinite != w.Nonfinite || pm.Min != w.Min || pm.Max != w.Max || !close(pm.Mean, w.Mean) || !close(pm.M2, w.M2) {
					t.Fatalf("c channel %d: %+v, want %+v", ch, pm, w)
				}
			}
		}
	}
}
