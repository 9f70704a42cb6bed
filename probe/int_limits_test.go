package probe

import (
	"math"
	"os"
	"path/filepath"
	"reflect"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Integer inputs and attributes at the int64 limits. Exporters write
// INT64_MAX for "no limit" and INT64_MIN / INT64_MAX for "to the end"; read
// through float64 they become ±2^63, out of int64's range, and convert to
// nonsense (a NonMaxSuppression limit of INT64_MAX turned into 0 boxes).
// Expected values follow the ONNX operator specification (Operators.md,
// section named in each test) and, where the conformance data has a case,
// its inputs and outputs (/work/shared/onnx-conformance/node).

const (
	i64Max = math.MaxInt64
	i64Min = math.MinInt64
)

func i64(v ...int64) *tensor.Tensor { return tensor.From(v, len(v)) }

func i64Scalar(v int64) *tensor.Tensor { return tensor.From([]int64{v}) }

// limitsConformance loads the inputs and first output of a conformance case, or skips.
func limitsConformance(t *testing.T, name string) ([]*tensor.Tensor, *tensor.Tensor) {
	t.Helper()
	root := os.Getenv("VITALS_CONFORMANCE")
	if root == "" {
		root = "../../shared/onnx-conformance"
		if _, err := os.Stat(root); err != nil {
			root = "../shared/onnx-conformance"
		}
	}
	dir := filepath.Join(root, "node", name, "test_data_set_0")
	if _, err := os.Stat(dir); err != nil {
		t.Skipf("conformance case %s not found (set VITALS_CONFORMANCE)", name)
	}
	var ins []*tensor.Tensor
	for i := 0; ; i++ {
		p := filepath.Join(dir, "input_"+string(rune('0'+i))+".pb")
		if _, err := os.Stat(p); err != nil {
			break
		}
		x, _, err := loader.DecodeTensorFile(p)
		if err != nil {
			t.Fatal(err)
		}
		ins = append(ins, x)
	}
	want, _, err := loader.DecodeTensorFile(filepath.Join(dir, "output_0.pb"))
	if err != nil {
		t.Fatal(err)
	}
	return ins, want
}

// Operators.md, NonMaxSuppression: max_output_boxes_per_class is "the maximum
// number of boxes to be selected per batch per class"; INT64_MAX can never
// bind, so the result equals the one with a limit of the box count, and the
// conformance case's limited output (limit 3) is its prefix.
func TestIntLimitsNonMaxSuppression(t *testing.T) {
	ins, want := limitsConformance(t, "test_nonmaxsuppression_suppress_by_IOU")
	if got := ins[2].I64()[0]; got != 3 {
		t.Fatalf("conformance case changed: limit %d, want 3", got)
	}
	run := func(limit int64) []int64 {
		t.Helper()
		in := append([]*tensor.Tensor{}, ins...)
		in[2] = tensor.From([]int64{limit}, 1)
		out, err := detectRun(t, "NonMaxSuppression", 11, nil, in...)
		if err != nil {
			t.Fatal(err)
		}
		return out.I64()
	}
	all := run(int64(ins[0].Shape[1]))
	got := run(i64Max)
	if len(got) == 0 {
		t.Fatal("INT64_MAX limit selected no boxes")
	}
	if !reflect.DeepEqual(got, all) {
		t.Errorf("INT64_MAX limit selected %v, limit = box count selected %v", got, all)
	}
	if w := want.I64(); len(got) < len(w) || !reflect.DeepEqual(got[:len(w)], w) {
		t.Errorf("INT64_MAX selection %v does not start with the conformance output %v", got, w)
	}
	// a negative limit selects nothing (no box may be selected), as 0 does
	if neg := run(i64Min); len(neg) != 0 {
		t.Errorf("INT64_MIN limit selected %v, want none", neg)
	}
}

// Operators.md, Slice: "If the value passed to start or end is larger than
// the n ... it represents n ... it is recommended to pass in INT_MAX when
// slicing forward and INT_MIN when slicing backward"; steps may be any
// non-zero int64.
func TestIntLimitsSlice(t *testing.T) {
	x := tensor.From([]float32{0, 1, 2, 3, 4, 5, 6, 7, 8, 9}, 10)
	cases := []struct {
		name                string
		starts, ends, steps int64
		want                []float32
	}{
		{"forward to INT64_MAX", 2, i64Max, 1, []float32{2, 3, 4, 5, 6, 7, 8, 9}},
		{"from INT64_MIN", i64Min, 3, 1, []float32{0, 1, 2}},
		{"backward to INT64_MIN", 7, i64Min, -1, []float32{7, 6, 5, 4, 3, 2, 1, 0}},
		{"backward from INT64_MAX", i64Max, i64Min, -3, []float32{9, 6, 3, 0}},
		{"step INT64_MAX", 1, i64Max, i64Max, []float32{1}},
		{"step INT64_MIN", i64Max, i64Min, i64Min, []float32{9}},
		{"empty from INT64_MAX", i64Max, i64Max, 1, []float32{}},
	}
	for _, tc := range cases {
		outs, err := shapeRun("Slice", 13, nil, 1, x, i64(tc.starts), i64(tc.ends), i64(0), i64(tc.steps))
		if err != nil {
			t.Errorf("%s: %v", tc.name, err)
			continue
		}
		if got := outs[0].F32(); !reflect.DeepEqual(got, tc.want) {
			t.Errorf("%s: got %v, want %v", tc.name, got, tc.want)
		}
	}
	// the conformance case with ends beyond the axis, with the end raised to INT64_MAX
	ins, want := limitsConformance(t, "test_slice_end_out_of_bounds")
	ends := ins[2].Clone()
	for i := range ends.I64() {
		ends.I64()[i] = i64Max
	}
	in := append([]*tensor.Tensor{}, ins...)
	in[2] = ends
	outs, err := shapeRun("Slice", 13, nil, 1, in...)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(outs[0].Shape, want.Shape) || !reflect.DeepEqual(outs[0].F32(), want.F32()) {
		t.Errorf("test_slice_end_out_of_bounds with INT64_MAX ends: got %v, want %v", outs[0], want)
	}
}

// Operators.md, Range: number_of_elements = max(ceil((limit - start) / delta), 0),
// out[i] = start + i*delta, computed here at the int64 limits where float64
// cannot hold the bounds exactly (2^63-1 rounds to 2^63).
func TestIntLimitsRange(t *testing.T) {
	cases := []struct {
		start, limit, delta int64
		want                []int64
	}{
		{i64Max - 3, i64Max, 1, []int64{i64Max - 3, i64Max - 2, i64Max - 1}},
		{i64Min + 2, i64Min, -1, []int64{i64Min + 2, i64Min + 1}},
		{i64Min, i64Max, i64Max, []int64{i64Min, -1, i64Max - 1}},
		{i64Max, i64Min, i64Min, []int64{i64Max, -1}},
		{0, i64Max, i64Max, []int64{0}},
		{5, 5, i64Min, []int64{}},
	}
	for _, tc := range cases {
		outs, err := shapeRun("Range", 11, nil, 1, i64Scalar(tc.start), i64Scalar(tc.limit), i64Scalar(tc.delta))
		if err != nil {
			t.Errorf("Range(%d, %d, %d): %v", tc.start, tc.limit, tc.delta, err)
			continue
		}
		if got := outs[0].I64(); !reflect.DeepEqual(got, tc.want) {
			t.Errorf("Range(%d, %d, %d) = %v, want %v", tc.start, tc.limit, tc.delta, got, tc.want)
		}
	}
	// 2^63-1 elements: refused with an error, not allocated or wrapped
	if _, err := shapeRun("Range", 11, nil, 1, i64Scalar(0), i64Scalar(i64Max), i64Scalar(1)); err == nil {
		t.Error("Range(0, INT64_MAX, 1): no error")
	}
}

// Operators.md, TopK: k must satisfy 1 <= k <= the axis size (0 is
// accepted too); INT64_MAX and INT64_MIN are errors, not a wrapped k.
func TestIntLimitsTopK(t *testing.T) {
	x := tensor.From([]float32{3, 1, 2}, 3)
	for _, k := range []int64{i64Max, i64Min} {
		_, err := detectRun(t, "TopK", 11, nil, x, i64(k))
		detectWantErr(t, "TopK k", err, "k =")
	}
	outs, err := shapeRun("TopK", 11, nil, 2, x, i64(2))
	if err != nil {
		t.Fatal(err)
	}
	if got := outs[0].F32(); !reflect.DeepEqual(got, []float32{3, 2}) {
		t.Errorf("TopK k=2 = %v", got)
	}
}

// Operators.md, OneHot: depth is the number of classes; values must be in
// [-depth, depth-1] and others give an all-off row (see
// test_onehot_out_of_range_indices). A depth of INT64_MAX is refused (its
// output cannot be held), INT64_MIN is not positive; an index of INT64_MAX
// or INT64_MIN is out of range and leaves its row off.
func TestIntLimitsOneHot(t *testing.T) {
	vals := tensor.From([]float32{0, 1}, 2)
	for _, depth := range []int64{i64Max, i64Min} {
		_, err := detectRun(t, "OneHot", 11, nil, i64(0), i64(depth), vals)
		detectWantErr(t, "OneHot depth", err, "depth")
	}
	out, err := detectRun(t, "OneHot", 11, nil, i64(i64Max, 1, i64Min), i64(3), vals)
	if err != nil {
		t.Fatal(err)
	}
	if got, want := out.F32(), []float32{0, 0, 0, 0, 1, 0, 0, 0, 0}; !reflect.DeepEqual(got, want) {
		t.Errorf("OneHot indices at the limits = %v, want %v", got, want)
	}
	// a uint64 index above INT64_MAX must not wrap into range
	big := tensor.From([]uint64{math.MaxUint64, 2}, 2)
	out, err = detectRun(t, "OneHot", 11, nil, big, i64(3), vals)
	if err != nil {
		t.Fatal(err)
	}
	if got, want := out.F32(), []float32{0, 0, 0, 0, 0, 1}; !reflect.DeepEqual(got, want) {
		t.Errorf("OneHot uint64 indices = %v, want %v", got, want)
	}
}

// Shape-producing inputs (Operators.md: Tile repeats, Expand shape, Reshape
// shape, ConstantOfShape input, Pad pads, Split split) at the int64 limits
// describe tensors that cannot exist: each must be an error naming the
// problem, never a panic or a product that wraps around into a small valid
// shape (4 × 2^62 wraps to 0, INT64_MAX × INT64_MAX to 1).
func TestIntLimitsShapes(t *testing.T) {
	x := tensor.From([]float32{1, 2, 3, 4}, 4)
	one := tensor.From([]float32{7}, 1)
	cases := []struct {
		op    string
		opset int
		attrs map[string]*loader.Attr
		nOut  int
		ins   []*tensor.Tensor
	}{
		{"Tile", 13, nil, 1, []*tensor.Tensor{x, i64(i64Max)}},
		{"Tile", 13, nil, 1, []*tensor.Tensor{x, i64(1 << 62)}},
		{"Tile", 13, nil, 1, []*tensor.Tensor{x, i64(i64Min)}},
		{"Expand", 13, nil, 1, []*tensor.Tensor{one, i64(i64Max)}},
		{"Expand", 13, nil, 1, []*tensor.Tensor{one, i64(i64Min)}},
		{"Reshape", 14, nil, 1, []*tensor.Tensor{one, i64(i64Max, i64Max)}},
		{"Reshape", 14, nil, 1, []*tensor.Tensor{one, i64(i64Max)}},
		{"Reshape", 14, nil, 1, []*tensor.Tensor{one, i64(i64Min)}},
		{"Reshape", 14, nil, 1, []*tensor.Tensor{x, i64(-1, i64Max)}},
		{"ConstantOfShape", 9, nil, 1, []*tensor.Tensor{i64(i64Max)}},
		{"ConstantOfShape", 9, nil, 1, []*tensor.Tensor{i64(i64Min)}},
		{"Pad", 13, nil, 1, []*tensor.Tensor{x, i64(i64Max, 0)}},
		{"Pad", 13, nil, 1, []*tensor.Tensor{x, i64(1, i64Max)}},
		{"Pad", 13, nil, 1, []*tensor.Tensor{x, i64(i64Min, 0)}},
		{"Pad", 13, nil, 1, []*tensor.Tensor{x, i64(i64Max, i64Max)}},
		{"Split", 13, nil, 2, []*tensor.Tensor{x, i64(i64Max, i64Max)}},
		{"Split", 13, nil, 2, []*tensor.Tensor{x, i64(i64Min, i64Min+4)}},
		{"Split", 13, nil, 5, []*tensor.Tensor{x, i64(1<<62, 1<<62, 1<<62, 1<<62, 4)}},
		{"Gather", 13, nil, 1, []*tensor.Tensor{x, i64(i64Max)}},
		{"Gather", 13, nil, 1, []*tensor.Tensor{x, i64(i64Min)}},
		{"Unsqueeze", 13, nil, 1, []*tensor.Tensor{x, i64(i64Max)}},
		{"CumSum", 14, nil, 1, []*tensor.Tensor{x, i64(i64Max)}},
		{"Resize", 13, map[string]*loader.Attr{"mode": shapeStrAttr("mode", "nearest")}, 1,
			[]*tensor.Tensor{x, nil, nil, i64(i64Max)}},
	}
	for _, tc := range cases {
		_, err := detectRun(t, tc.op, tc.opset, tc.attrs, tc.ins...)
		if err == nil {
			t.Errorf("%s with %v: no error", tc.op, tc.ins[len(tc.ins)-1].Data)
		}
	}
}

// Operators.md, Trilu: k may be any int64; upper keeps j-i >= k, lower keeps
// j-i <= k. At INT64_MAX lower keeps everything and upper nothing; at
// INT64_MIN the reverse.
func TestIntLimitsTrilu(t *testing.T) {
	x := tensor.From([]float32{1, 2, 3, 4}, 2, 2)
	zero := []float32{0, 0, 0, 0}
	for _, tc := range []struct {
		k     int64
		upper int64
		want  []float32
	}{
		{i64Max, 0, x.F32()}, {i64Max, 1, zero}, {i64Min, 0, zero}, {i64Min, 1, x.F32()},
	} {
		out, err := detectRun(t, "Trilu", 14, map[string]*loader.Attr{"upper": detectInt("upper", tc.upper)}, x, i64Scalar(tc.k))
		if err != nil {
			t.Error(err)
			continue
		}
		if got := out.F32(); !reflect.DeepEqual(got, tc.want) {
			t.Errorf("Trilu k=%d upper=%d = %v, want %v", tc.k, tc.upper, got, tc.want)
		}
	}
}

// Int64At reads every integer type exactly; floats saturate at the limits.
// Known answers: the int64 limits themselves, and 2^53+1, the first integer
// float64 cannot hold (IEEE 754 binary64 has a 53-bit significand).
func TestInt64AtExact(t *testing.T) {
	cases := []struct {
		t    *tensor.Tensor
		want int64
	}{
		{i64Scalar(i64Max), i64Max},
		{i64Scalar(i64Min), i64Min},
		{i64Scalar(1<<53 + 1), 1<<53 + 1},
		{tensor.From([]uint64{math.MaxUint64}), i64Max},
		{tensor.From([]uint64{1<<53 + 1}), 1<<53 + 1},
		{tensor.From([]float64{1e300}), i64Max},
		{tensor.From([]float64{-1e300}), i64Min},
		{tensor.From([]float32{-2.9}), -2},
	}
	for _, tc := range cases {
		if got := tc.t.Int64At(0); got != tc.want {
			t.Errorf("Int64At(%v %v) = %d, want %d", tc.t.DType, tc.t.Data, got, tc.want)
		}
	}
	if n, err := ScalarInt(i64Scalar(i64Max)); err != nil || n != math.MaxInt {
		t.Errorf("ScalarInt(INT64_MAX) = %d, %v", n, err)
	}
}
