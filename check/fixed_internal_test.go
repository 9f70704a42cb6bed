package check

import (
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// The batch dimension is the per-sample inputs' symbol named like a batch,
// wherever it sits, else the symbol of their first axis; fixed inputs do
// not decide it.
func TestBatchSymbol(t *testing.T) {
	in := func(name string, syms ...string) loader.ValueInfo {
		return loader.ValueInfo{Name: name, Symbols: syms, Shape: make([]int, len(syms))}
	}
	all := func(string) bool { return true }
	for _, c := range []struct {
		inputs    []loader.ValueInfo
		perSample func(string) bool
		want      string
	}{
		{[]loader.ValueInfo{in("x", "seq", "batch", "")}, all, "batch"},
		{[]loader.ValueInfo{in("x", "N", "")}, all, "N"},
		{[]loader.ValueInfo{in("x", "seq", "")}, all, "seq"},
		{[]loader.ValueInfo{in("x", "", ""), in("state", "", "batch_size", "")}, func(n string) bool { return n == "x" }, ""},
		{[]loader.ValueInfo{in("x", "frames", ""), in("state", "", "batch", "")}, func(n string) bool { return n == "x" }, "frames"},
	} {
		if got := batchSymbol(&loader.Graph{Inputs: c.inputs}, c.perSample); got != c.want {
			t.Errorf("%v: batch symbol %q, want %q", c.inputs, got, c.want)
		}
	}
}

// spreadAxis moves the sample axis to axis a (out[o, b, i] = t[b, o, i])
// and repeats a size-1 axis; checked element by element against index
// arithmetic written out here, for an integer dtype.
func TestSpreadAxis(t *testing.T) {
	// t[b, o, i] = 100·b + 10·o + i, shape [2 samples, 3, 4] → [3, 2, 4]
	x := tensor.New(tensor.Int64, []int{2, 3, 4})
	for b := 0; b < 2; b++ {
		for o := 0; o < 3; o++ {
			for i := 0; i < 4; i++ {
				x.I64()[(b*3+o)*4+i] = int64(100*b + 10*o + i)
			}
		}
	}
	y := spreadAxis(x, 1, 2, false)
	if !tensor.SameShape(y.Shape, []int{3, 2, 4}) {
		t.Fatalf("shape %v", y.Shape)
	}
	for o := 0; o < 3; o++ {
		for b := 0; b < 2; b++ {
			for i := 0; i < 4; i++ {
				if got := y.I64()[(o*2+b)*4+i]; got != int64(100*b+10*o+i) {
					t.Fatalf("y[%d,%d,%d] = %d", o, b, i, got)
				}
			}
		}
	}
	// [3, 1, 4] repeated to [3, 5, 4]
	r := spreadAxis(x.Reshaped([]int{2, 3, 4}).Reshaped([]int{6, 1, 4}), 1, 5, true)
	for o := 0; o < 6; o++ {
		for b := 0; b < 5; b++ {
			for i := 0; i < 4; i++ {
				if r.I64()[(o*5+b)*4+i] != x.I64()[o*4+i] {
					t.Fatalf("repeat: r[%d,%d,%d] = %d", o, b, i, r.I64()[(o*5+b)*4+i])
				}
			}
		}
	}
}
