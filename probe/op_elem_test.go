package probe

import (
	"math"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// elemRun runs kernel k on a single node built from attrs and inputs.
func elemRun(t *testing.T, k Kernel, opset int, attrs map[string]*loader.Attr, nOut int, in ...*tensor.Tensor) ([]*tensor.Tensor, error) {
	t.Helper()
	n := &loader.Node{Attrs: attrs}
	for i := range in {
		n.Inputs = append(n.Inputs, string(rune('a'+i)))
	}
	for i := 0; i < nOut; i++ {
		n.Outputs = append(n.Outputs, string(rune('x'+i)))
	}
	c := &Call{Node: n, In: in, Out: make([]*tensor.Tensor, nOut), Opset: opset}
	err := k(c)
	return c.Out, err
}

func TestElemCastStrings(t *testing.T) {
	to := func(dt tensor.DType) map[string]*loader.Attr {
		return map[string]*loader.Attr{"to": {Name: "to", Kind: loader.AttrInt, I: int64(dt)}}
	}
	out, err := elemRun(t, elemCast, 13, to(tensor.Float32), 1, tensor.From([]string{"1.5", "-inf", "NaN", "1e40"}, 4))
	if err != nil {
		t.Fatal(err)
	}
	f := out[0].F32()
	if f[0] != 1.5 || !math.IsInf(float64(f[1]), -1) || !math.IsNaN(float64(f[2])) || !math.IsInf(float64(f[3]), 1) {
		t.Errorf("string to float: %v", f)
	}
	out, err = elemRun(t, elemCast, 13, to(tensor.Int64), 1, tensor.From([]string{"-7", "3.9"}, 2))
	if err != nil || out[0].I64()[0] != -7 || out[0].I64()[1] != 3 {
		t.Errorf("string to int64: %v %v", out[0], err)
	}
	out, err = elemRun(t, elemCast, 13, to(tensor.String), 1, tensor.From([]float32{0.1, -2}, 2))
	if err != nil || out[0].Data.([]string)[0] != "0.1" || out[0].Data.([]string)[1] != "-2" {
		t.Errorf("float to string: %v %v", out[0].Data, err)
	}
	if _, err = elemRun(t, elemCast, 13, to(tensor.String), 1, tensor.From([]string{"x"}, 1)); err != nil {
		t.Error(err)
	}
	if _, err = elemRun(t, elemCast, 13, to(tensor.Float32), 1, tensor.From([]string{"abc"}, 1)); err == nil {
		t.Error("parsing \"abc\" should fail")
	}
	if _, err = elemRun(t, elemCast, 21, to(17), 1, tensor.From([]float32{1}, 1)); err == nil || !strings.Contains(err.Error(), "unsupported data type") {
		t.Errorf("cast to float8: %v", err)
	}
}

func TestElemRoundFloat16(t *testing.T) {
	d := []float32{1 + 1.0/4096, 65519, 65520, -1e-8, 5.96e-8, 0.1}
	elemRoundFloats(d, 11, -14, 65504)
	want := []float32{1, 65504, float32(math.Inf(1)), 0, float32(math.Ldexp(1, -24)), 0.0999755859375}
	for i := range want {
		if d[i] != want[i] && !(d[i] == 0 && want[i] == 0) {
			t.Errorf("element %d: %g, want %g", i, d[i], want[i])
		}
	}
}

func TestElemWhereBroadcast(t *testing.T) {
	cond := tensor.From([]bool{true, false}, 2, 1)
	x := tensor.From([]int64{1, 2, 3}, 3)
	y := tensor.From([]int64{-1}, 1)
	out, err := elemRun(t, elemWhere, 16, nil, 1, cond, x, y)
	if err != nil {
		t.Fatal(err)
	}
	want := []int64{1, 2, 3, -1, -1, -1}
	if !tensor.SameShape(out[0].Shape, []int{2, 3}) {
		t.Fatalf("shape %v", out[0].Shape)
	}
	for i, v := range out[0].I64() {
		if v != want[i] {
			t.Fatalf("got %v, want %v", out[0].I64(), want)
		}
	}
}

func TestElemClipAndDropout(t *testing.T) {
	x := tensor.From([]int32{-5, 0, 5}, 3)
	out, err := elemRun(t, elemClip, 13, nil, 1, x, nil, tensor.From([]int32{2}))
	if err != nil || out[0].Data.([]int32)[0] != -5 || out[0].Data.([]int32)[2] != 2 {
		t.Errorf("clip max only: %v %v", out[0], err)
	}
	if _, err := elemRun(t, elemClip, 13, nil, 1, x, tensor.From([]int32{1, 2}, 2)); err == nil {
		t.Error("non-scalar bound accepted")
	}
	f := tensor.From([]float32{1, 2}, 2)
	_, err = elemRun(t, elemDropout, 13, nil, 2, f, tensor.Scalar(0.5), tensor.From([]bool{true}))
	if err == nil || !strings.Contains(err.Error(), "training mode is not supported") {
		t.Errorf("training dropout: %v", err)
	}
	out, err = elemRun(t, elemDropout, 7, nil, 2, f)
	if err != nil || out[1].DType != tensor.Float32 || out[1].F32()[1] != 1 {
		t.Errorf("opset 7 mask: %v %v", out[1], err)
	}
}

// Dropout's inference mask is all true (ONNX Dropout, opset 12: "mask" is
// all ones when not training) for every length, powers of two and not.
func TestFillTrueAllLengths(t *testing.T) {
	for _, n := range []int{0, 1, 2, 3, 7, 64, 1000, 4097} {
		b := make([]bool, n)
		fillTrue(b)
		for i, v := range b {
			if !v {
				t.Fatalf("n=%d: element %d false", n, i)
			}
		}
	}
}
