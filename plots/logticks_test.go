package plots

import (
	"math"
	"testing"
)

// labels returns the labelled ticks of logTicks between lo and hi (values,
// not their logarithms).
func labels(lo, hi float64) []string {
	var out []string
	for _, t := range (logTicks{}).Ticks(math.Log10(lo), math.Log10(hi)) {
		if t.Label != "" {
			out = append(out, t.Label)
		}
	}
	return out
}

// A narrow log axis (less than two decades) still carries at least two
// numbers; a wide one labels the powers of ten only.
func TestLogTicksLabelNarrowAxes(t *testing.T) {
	got := labels(0.15, 1.3)
	want := []string{"0.2", "0.5", "1"}
	if len(got) != len(want) {
		t.Fatalf("narrow axis labels %v, want %v", got, want)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("narrow axis labels %v, want %v", got, want)
		}
	}
	wide := labels(1e-6, 0.3)
	for _, l := range wide {
		if l != "1e-06" && l != "1e-05" && l != "0.0001" && l != "0.001" && l != "0.01" && l != "0.1" {
			t.Fatalf("wide axis labels %v: only powers of ten expected", wide)
		}
	}
	if len(wide) != 6 {
		t.Fatalf("wide axis labels %v, want the six powers of ten", wide)
	}
}
