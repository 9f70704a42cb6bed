package probe

import (
	"math"
	"reflect"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Kernels of op_select.go, op_gridsample.go and op_det.go: bad inputs give an
// error naming the problem (never a panic); a few values worked out by hand.

// selRun runs one registered kernel, turning a panic into a test failure.
func selRun(t *testing.T, op string, opset int, attrs map[string]*loader.Attr, ins ...*tensor.Tensor) (out *tensor.Tensor, err error) {
	t.Helper()
	k, ok := Lookup("", op, opset)
	if !ok {
		t.Fatalf("no kernel for %s at opset %d", op, opset)
	}
	if attrs == nil {
		attrs = map[string]*loader.Attr{}
	}
	c := &Call{Node: &loader.Node{OpType: op, Attrs: attrs, Outputs: []string{"y"}}, In: ins, Out: make([]*tensor.Tensor, 1), Opset: opset}
	defer func() {
		if r := recover(); r != nil {
			t.Fatalf("%s panicked: %v", op, r)
		}
	}()
	err = k(c)
	return c.Out[0], err
}

func selInt(name string, v int64) *loader.Attr {
	return &loader.Attr{Name: name, Kind: loader.AttrInt, I: v}
}

func selStr(name, v string) *loader.Attr {
	return &loader.Attr{Name: name, Kind: loader.AttrString, S: v}
}

// selWantErr checks that err is not nil and mentions every fragment.
func selWantErr(t *testing.T, what string, err error, fragments ...string) {
	t.Helper()
	if err == nil {
		t.Fatalf("%s: no error", what)
	}
	for _, f := range fragments {
		if !strings.Contains(err.Error(), f) {
			t.Errorf("%s: error %q does not mention %q", what, err, f)
		}
	}
}

func TestSelectBadInputs(t *testing.T) {
	x4 := tensor.New(tensor.Float32, []int{1, 1, 2, 2})
	// GridSample: the grid's last dimension must be the number of spatial dims
	_, err := selRun(t, "GridSample", 20, nil, x4, tensor.New(tensor.Float32, []int{1, 3, 3, 3}))
	selWantErr(t, "grid of the wrong last dimension", err, "grid last dimension", "2")
	_, err = selRun(t, "GridSample", 20, nil, x4, tensor.New(tensor.Float32, []int{2, 3, 3, 2}))
	selWantErr(t, "grid of another batch", err, "grid batch 2", "X batch 1")
	_, err = selRun(t, "GridSample", 20, nil, x4, tensor.New(tensor.Float32, []int{1, 3, 2}))
	selWantErr(t, "grid of the wrong rank", err, "grid must have rank 4")
	_, err = selRun(t, "GridSample", 16, nil, tensor.New(tensor.Float32, []int{1, 1, 2, 2, 2}), tensor.New(tensor.Float32, []int{1, 1, 1, 1, 3}))
	selWantErr(t, "5-D X at opset 16", err, "4-D", "opset 16")
	_, err = selRun(t, "GridSample", 20, map[string]*loader.Attr{"mode": selStr("mode", "area")}, x4, tensor.New(tensor.Float32, []int{1, 1, 1, 2}))
	selWantErr(t, "unknown mode", err, `mode "area"`)
	_, err = selRun(t, "GridSample", 20, map[string]*loader.Attr{"padding_mode": selStr("padding_mode", "wrap")}, x4, tensor.New(tensor.Float32, []int{1, 1, 1, 2}))
	selWantErr(t, "unknown padding_mode", err, `padding_mode "wrap"`)
	_, err = selRun(t, "GridSample", 20, nil, x4, tensor.New(tensor.Int64, []int{1, 1, 1, 2}))
	selWantErr(t, "integer grid", err, "grid must be float32 or float64")

	// Compress: the condition may not be longer than the axis (or the flattened input)
	x := tensor.From([]float32{1, 2, 3, 4, 5, 6}, 2, 3)
	_, err = selRun(t, "Compress", 11, map[string]*loader.Attr{"axis": selInt("axis", 0)}, x, tensor.From([]bool{true, false, true}, 3))
	selWantErr(t, "condition longer than the axis", err, "condition has 3 entries", "axis 0")
	_, err = selRun(t, "Compress", 9, nil, x, tensor.From(make([]bool, 7), 7))
	selWantErr(t, "condition longer than the flattened input", err, "condition has 7 entries", "6 elements")
	_, err = selRun(t, "Compress", 11, map[string]*loader.Attr{"axis": selInt("axis", 2)}, x, tensor.From([]bool{true}, 1))
	selWantErr(t, "axis out of range", err, "axis 2 out of range")
	_, err = selRun(t, "Compress", 11, nil, x, tensor.From([]bool{true, true}, 1, 2))
	selWantErr(t, "2-D condition", err, "condition must be 1-D")

	// ReverseSequence: every length must fit the time axis
	seq := tensor.New(tensor.Float32, []int{3, 2}) // time 3, batch 2
	_, err = selRun(t, "ReverseSequence", 10, nil, seq, tensor.From([]int64{2, 4}, 2))
	selWantErr(t, "sequence length over the time axis", err, "sequence_lens[1] = 4", "[0, 3]")
	_, err = selRun(t, "ReverseSequence", 10, nil, seq, tensor.From([]int64{-1, 1}, 2))
	selWantErr(t, "negative sequence length", err, "sequence_lens[0] = -1")
	_, err = selRun(t, "ReverseSequence", 10, nil, seq, tensor.From([]int64{1, 1, 1}, 3))
	selWantErr(t, "one length per batch entry", err, "sequence_lens must have shape [2]")
	_, err = selRun(t, "ReverseSequence", 10, map[string]*loader.Attr{"time_axis": selInt("time_axis", 1)}, seq, tensor.From([]int64{1, 1, 1}, 3))
	selWantErr(t, "same batch and time axis", err, "batch_axis 1 and time_axis 1")
	_, err = selRun(t, "ReverseSequence", 10, nil, tensor.New(tensor.Float32, []int{3}), tensor.From([]int64{1}, 1))
	selWantErr(t, "1-D input", err, "rank >= 2")

	// Det: square matrices only
	_, err = selRun(t, "Det", 11, nil, tensor.New(tensor.Float32, []int{2, 2, 3}))
	selWantErr(t, "non-square Det input", err, "square", "2×3")
	_, err = selRun(t, "Det", 11, nil, tensor.New(tensor.Float32, []int{4}))
	selWantErr(t, "1-D Det input", err, "rank >= 2")
	_, err = selRun(t, "Det", 11, nil, tensor.New(tensor.Int64, []int{2, 2}))
	selWantErr(t, "integer Det input", err, "float32 or float64")
}

// The run loop reports a kernel error with the node's name.
func TestSelectErrorNamesNode(t *testing.T) {
	b := modelbuild.New("det", 11)
	b.Input("x", []int{2, 3}, false)
	b.Node("Det", "det_rect", []string{"x"}, []string{"y"})
	b.Output("y")
	_, p := planOf(t, b)
	_, err := p.Run(map[string]*tensor.Tensor{"x": tensor.New(tensor.Float32, []int{2, 3})}, nil)
	selWantErr(t, "Det of a 2×3 matrix", err, "det_rect", "square")
}

func TestSelectValues(t *testing.T) {
	// ReverseSequence on strings, batch on axis 0 and time on axis 1
	s := tensor.From([]string{"a", "b", "c", "d", "e", "f"}, 2, 3)
	out, err := selRun(t, "ReverseSequence", 10, map[string]*loader.Attr{"batch_axis": selInt("batch_axis", 0), "time_axis": selInt("time_axis", 1)}, s, tensor.From([]int64{3, 2}, 2))
	if err != nil {
		t.Fatal(err)
	}
	if got := out.Data.([]string); !reflect.DeepEqual(got, []string{"c", "b", "a", "e", "d", "f"}) {
		t.Errorf("ReverseSequence strings = %v", got)
	}
	// Compress on bools with a short condition, and on the flattened input
	bs := tensor.From([]bool{true, false, false, true, true, false}, 2, 3)
	out, err = selRun(t, "Compress", 11, map[string]*loader.Attr{"axis": selInt("axis", -1)}, bs, tensor.From([]bool{false, true}, 2))
	if err != nil {
		t.Fatal(err)
	}
	if got := out.Data.([]bool); !reflect.DeepEqual(out.Shape, []int{2, 1}) || !reflect.DeepEqual(got, []bool{false, true}) {
		t.Errorf("Compress bools = %v %v", out.Shape, got)
	}
	out, err = selRun(t, "Compress", 9, nil, s, tensor.From([]bool{false, true, false, false, true}, 5))
	if err != nil {
		t.Fatal(err)
	}
	if got := out.Data.([]string); !reflect.DeepEqual(out.Shape, []int{2}) || !reflect.DeepEqual(got, []string{"b", "e"}) {
		t.Errorf("Compress flattened = %v %v", out.Shape, got)
	}

	// Det: batched float64, a pivot swap, a singular matrix and the empty matrix
	m := tensor.From([]float64{
		0, 2, 1, 3, // needs a row swap: det = -2
		1, 2, 2, 4, // singular
	}, 2, 2, 2)
	out, err = selRun(t, "Det", 11, nil, m)
	if err != nil {
		t.Fatal(err)
	}
	if got := out.F64(); !reflect.DeepEqual(out.Shape, []int{2}) || got[0] != -2 || got[1] != 0 {
		t.Errorf("Det = %v %v, want [2] [-2 0]", out.Shape, got)
	}
	out, err = selRun(t, "Det", 11, nil, tensor.New(tensor.Float32, []int{3, 0, 0}))
	if err != nil {
		t.Fatal(err)
	}
	if got := out.F32(); !reflect.DeepEqual(got, []float32{1, 1, 1}) {
		t.Errorf("Det of empty matrices = %v, want ones", got)
	}

	// GridSample: opset 16 names the modes bilinear/bicubic; the values match opset 20's linear/cubic.
	x := tensor.From([]float32{1, 2, 3, 4}, 1, 1, 2, 2)
	g := tensor.From([]float32{0, 0, -1, -1, 0.5, -0.25}, 1, 1, 3, 2)
	for _, pair := range [][2]string{{"bilinear", "linear"}, {"bicubic", "cubic"}, {"nearest", "nearest"}} {
		for _, pad := range []string{"zeros", "border", "reflection"} {
			attrs := func(mode string) map[string]*loader.Attr {
				return map[string]*loader.Attr{"mode": selStr("mode", mode), "padding_mode": selStr("padding_mode", pad)}
			}
			a, err := selRun(t, "GridSample", 16, attrs(pair[0]), x, g)
			if err != nil {
				t.Fatal(err)
			}
			b, err := selRun(t, "GridSample", 20, attrs(pair[1]), x, g)
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(a.F32(), b.F32()) {
				t.Errorf("%s/%s: opset 16 %v, opset 20 %v", pair[0], pad, a.F32(), b.F32())
			}
		}
	}
	// bilinear, align_corners=0: the centre is the mean; (-1,-1) is the outer
	// corner, a quarter of pixel 1 under zeros padding and all of it under border.
	out, err = selRun(t, "GridSample", 16, nil, x, g)
	if err != nil {
		t.Fatal(err)
	}
	if got := out.F32(); math.Abs(float64(got[0]-2.5)) > 1e-6 || math.Abs(float64(got[1]-0.25)) > 1e-6 {
		t.Errorf("GridSample bilinear = %v, want [2.5 0.25 …]", got)
	}
	out, err = selRun(t, "GridSample", 16, map[string]*loader.Attr{"padding_mode": selStr("padding_mode", "border")}, x, g)
	if err != nil {
		t.Fatal(err)
	}
	if got := out.F32(); got[1] != 1 {
		t.Errorf("GridSample border corner = %v, want 1", got[1])
	}
	// NaN and infinite grid positions are read without panicking.
	bad := tensor.From([]float32{float32(math.NaN()), 0, float32(math.Inf(1)), float32(math.Inf(-1))}, 1, 1, 2, 2)
	for _, mode := range []string{"linear", "nearest", "cubic"} {
		for _, pad := range []string{"zeros", "border", "reflection"} {
			if _, err := selRun(t, "GridSample", 20, map[string]*loader.Attr{"mode": selStr("mode", mode), "padding_mode": selStr("padding_mode", pad)}, x, bad); err != nil {
				t.Fatal(err)
			}
		}
	}
}
