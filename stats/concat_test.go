package stats

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
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
	merged, plain, derived := mergedAndDirect(m, p)
	if fmt.Sprint(derived) != fmt.Sprint(map[string]bool{"c": true}) {
		t.Fatalf("layers merged from parts %v, want cat's output c alone", derived)
	}
	runBatches(t, p, wideningBatches(rand.New(rand.NewPCG(11, 12)), 7), merged, plain)
	merged.mergeConcats()
	sameAsDirect(t, merged, plain)
	for i, la := range merged.layers {
		want := plain.layers[i]
		if la.output == "c" {
			if la.mom.Nonfinite != 2 || len(la.perChan) != 8 || len(want.perChan) != 8 || fmt.Sprint(la.shape) != fmt.Sprint(want.shape) {
				t.Fatalf("c: %d non-finite, %d and %d channels, shape %v and %v", la.mom.Nonfinite, len(la.perChan), len(want.perChan), la.shape, want.shape)
			}
			for ch, pm := range la.perChan {
				w := want.perChan[ch]
				if pm.N != w.N || pm.Nonfinite != w.Nonfinite || pm.Min != w.Min || pm.Max != w.Max || !closeRel(pm.Mean, w.Mean) || !closeRel(pm.M2, w.M2) {
					t.Fatalf("c channel %d: %+v, want %+v", ch, pm, w)
				}
			}
		}
	}
}

// A value that a Split reads takes its statistics from the Split's outputs
// (the ONNX Split definition: they partition it; here unevenly, 1, 2 and 3
// of 6 along the last axis), exactly as a direct pass gives them but for
// the last float64 bits of mean and M2; a Concat of the parts is merged
// from them too, and a Relu read by a Split is not (an activation's unit
// statistics need its values).
func TestSplitInputMergedFromParts(t *testing.T) {
	b := modelbuild.New("split", 11)
	b.Input("x", []int{1, 4, 6}, true)
	b.Node("Add", "twice", []string{"x", "x"}, []string{"w"})
	b.Node("Split", "split", []string{"w"}, []string{"p1", "p2", "p3"},
		modelbuild.Attr{Name: "axis", Value: 2}, modelbuild.Attr{Name: "split", Value: []int64{1, 2, 3}})
	b.Node("Concat", "join", []string{"p3", "p1", "p2"}, []string{"j"}, modelbuild.Attr{Name: "axis", Value: 2})
	b.Node("Relu", "relu", []string{"j"}, []string{"r"})
	b.Node("Split", "split2", []string{"r"}, []string{"r1", "r2"}, modelbuild.Attr{Name: "axis", Value: 2})
	b.Output("r1")
	b.Output("r2")
	m, p := BuildPlan(t, b)
	merged, plain, derived := mergedAndDirect(m, p)
	if fmt.Sprint(derived) != fmt.Sprint(map[string]bool{"j": true, "w": true}) {
		t.Fatalf("layers merged from parts %v, want w and j", derived)
	}
	runBatches(t, p, wideningBatches(rand.New(rand.NewPCG(13, 14)), 5), merged, plain)
	merged.mergeConcats()
	sameAsDirect(t, merged, plain)
}

// closeRel reports a and b equal to 1e-12 relative.
func closeRel(a, b float64) bool {
	return a == b || math.Abs(a-b) <= 1e-12*math.Max(math.Abs(a), math.Abs(b))
}

// sameAsDirect fails unless every layer of merged has plain's (a collector
// observing every layer directly) shape, counts, extremes and histogram,
// and its mean and M2 to 1e-12 relative.
func sameAsDirect(t *testing.T, merged, plain *Collector) {
	t.Helper()
	for i, la := range merged.layers {
		want := plain.layers[i]
		mom := la.mom
		if !closeRel(mom.Mean, want.mom.Mean) || !closeRel(mom.M2, want.mom.M2) {
			t.Fatalf("%s: mean %g M2 %g, want %g %g", la.output, mom.Mean, mom.M2, want.mom.Mean, want.mom.M2)
		}
		mom.Mean, mom.M2 = want.mom.Mean, want.mom.M2
		sameAccumulators(t, la, want, mom)
		if fmt.Sprint(la.shape) != fmt.Sprint(want.shape) {
			t.Fatalf("%s: shape %v, want %v", la.output, la.shape, want.shape)
		}
	}
}

// mergedAndDirect makes two collectors for plan p: one that merges layers
// from their parts where it can, and one that observes every layer
// directly (the reference), and lists the outputs of the merged layers.
func mergedAndDirect(m *loader.Model, p *probe.Plan) (merged, plain *Collector, derived map[string]bool) {
	merged = NewCollector(m, p)
	deriveConcats = false
	plain = NewCollector(m, p)
	deriveConcats = true
	derived = map[string]bool{}
	for _, la := range merged.layers {
		if la.parts != nil {
			derived[la.output] = true
		}
	}
	return merged, plain, derived
}
