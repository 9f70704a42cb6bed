package probe

import (
	"fmt"
	"reflect"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// shapeRun runs one registered kernel on the given inputs.
func shapeRun(op string, opset int, attrs map[string]*loader.Attr, nOut int, ins ...*tensor.Tensor) ([]*tensor.Tensor, error) {
	k, ok := Lookup("", op, opset)
	if !ok {
		return nil, fmt.Errorf("no kernel for %s", op)
	}
	outs := make([]string, nOut)
	for i := range outs {
		outs[i] = fmt.Sprint("y", i)
	}
	c := &Call{Node: &loader.Node{OpType: op, Attrs: attrs, Outputs: outs}, In: ins, Out: make([]*tensor.Tensor, nOut), Opset: opset}
	if err := k(c); err != nil {
		return nil, err
	}
	return c.Out, nil
}

func shapeIntsAttr(name string, v ...int64) *loader.Attr {
	return &loader.Attr{Name: name, Kind: loader.AttrInts, Ints: v}
}
func shapeStrAttr(name, v string) *loader.Attr {
	return &loader.Attr{Name: name, Kind: loader.AttrString, S: v}
}

// Data movement works on strings and bools, not only numbers.
func TestShapeMovesStringsAndBools(t *testing.T) {
	s := tensor.From([]string{"a", "b", "c", "d", "e", "f"}, 2, 3)
	out, err := shapeRun("Transpose", 13, nil, 1, s)
	if err != nil {
		t.Fatal(err)
	}
	if got := out[0].Data.([]string); !reflect.DeepEqual(got, []string{"a", "d", "b", "e", "c", "f"}) {
		t.Errorf("Transpose strings = %v", got)
	}
	b := tensor.From([]bool{true, false, false}, 3)
	out, err = shapeRun("Gather", 13, nil, 1, b, tensor.From([]int64{2, -3, 0}, 3))
	if err != nil {
		t.Fatal(err)
	}
	if got := out[0].Data.([]bool); !reflect.DeepEqual(got, []bool{false, true, true}) {
		t.Errorf("Gather bools = %v", got)
	}
	out, err = shapeRun("Concat", 13, map[string]*loader.Attr{"axis": {Name: "axis", I: -1}}, 1, s, tensor.From([]string{"x", "y"}, 2, 1))
	if err != nil {
		t.Fatal(err)
	}
	if got := out[0].Data.([]string); !reflect.DeepEqual(got, []string{"a", "b", "c", "x", "d", "e", "f", "y"}) {
		t.Errorf("Concat strings = %v", got)
	}
}

// Reflect, wrap and edge pads wider than the axis repeat the pattern periodically
// (values worked out by hand from the definitions).
func TestShapePadWide(t *testing.T) {
	x := tensor.From([]float32{1, 2, 3}, 3)
	cases := []struct {
		mode string
		want []float32
	}{
		{"reflect", []float32{1, 2, 3, 2, 1, 2, 3, 2, 1, 2, 3}},
		{"wrap", []float32{3, 1, 2, 3, 1, 2, 3, 1, 2, 3, 1}},
		{"edge", []float32{1, 1, 1, 1, 1, 2, 3, 3, 3, 3, 3}},
	}
	for _, tc := range cases {
		out, err := shapeRun("Pad", 18, map[string]*loader.Attr{"mode": shapeStrAttr("mode", tc.mode)}, 1, x, tensor.From([]int64{4, 4}, 2))
		if err != nil {
			t.Fatal(err)
		}
		if got := out[0].F32(); !reflect.DeepEqual(got, tc.want) {
			t.Errorf("%s: %v, want %v", tc.mode, got, tc.want)
		}
	}
	// 2-D: the corners come from both axes; negative pads crop.
	m := tensor.From([]float32{1, 2, 3, 4, 5, 6}, 2, 3)
	out, err := shapeRun("Pad", 18, map[string]*loader.Attr{"mode": shapeStrAttr("mode", "edge")}, 1, m, tensor.From([]int64{1, -1, 0, 1}, 4))
	if err != nil {
		t.Fatal(err)
	}
	want := []float32{2, 3, 3, 2, 3, 3, 5, 6, 6}
	if got := out[0].F32(); !reflect.DeepEqual(out[0].Shape, []int{3, 3}) || !reflect.DeepEqual(got, want) {
		t.Errorf("2-D edge pad: %v %v, want [3 3] %v", out[0].Shape, got, want)
	}
}

// Bad inputs give errors, never panics.
func TestShapeBadInputs(t *testing.T) {
	x := tensor.From([]float32{1, 2, 3, 4, 5, 6}, 2, 3)
	cases := []struct {
		op    string
		attrs map[string]*loader.Attr
		ins   []*tensor.Tensor
	}{
		{"Reshape", nil, []*tensor.Tensor{x, tensor.From([]int64{4, -1}, 2)}},
		{"Reshape", nil, []*tensor.Tensor{x, tensor.From([]int64{-1, -1}, 2)}},
		{"Gather", nil, []*tensor.Tensor{x, tensor.From([]int64{2}, 1)}},
		{"GatherElements", map[string]*loader.Attr{"axis": {Name: "axis", I: 1}}, []*tensor.Tensor{x, tensor.From([]int64{0, 3}, 1, 2)}},
		{"GatherND", nil, []*tensor.Tensor{x, tensor.From([]int64{0, 1, 2}, 1, 3)}},
		{"Transpose", map[string]*loader.Attr{"perm": shapeIntsAttr("perm", 0, 0)}, []*tensor.Tensor{x}},
		{"Squeeze", nil, []*tensor.Tensor{x, tensor.From([]int64{0}, 1)}},
		{"Expand", nil, []*tensor.Tensor{x, tensor.From([]int64{4, 3}, 2)}},
		{"Tile", nil, []*tensor.Tensor{x, tensor.From([]int64{2}, 1)}},
		{"Slice", nil, []*tensor.Tensor{x, tensor.From([]int64{0}, 1), tensor.From([]int64{1}, 1), tensor.From([]int64{0}, 1), tensor.From([]int64{0}, 1)}},
		{"Pad", map[string]*loader.Attr{"mode": shapeStrAttr("mode", "reflect")}, []*tensor.Tensor{tensor.New(tensor.Float32, []int{0, 2}), tensor.From([]int64{1, 0, 1, 0}, 4)}},
		{"Range", nil, []*tensor.Tensor{tensor.From([]float32{0}), tensor.From([]float32{1}), tensor.From([]float32{0})}},
		{"TopK", nil, []*tensor.Tensor{x, tensor.From([]int64{4}, 1)}},
		{"ConstantOfShape", nil, []*tensor.Tensor{tensor.From([]int64{-1}, 1)}},
		{"ReduceSum", nil, []*tensor.Tensor{x, tensor.From([]int64{2}, 1)}},
	}
	for _, tc := range cases {
		if _, err := shapeRun(tc.op, 18, tc.attrs, 2, tc.ins...); err == nil {
			t.Errorf("%s %v: no error", tc.op, tc.ins)
		}
	}
}
