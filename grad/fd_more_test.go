package grad

import (
	"errors"
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// moreCases are the finite-difference cases of the window, normalisation,
// softmax, reduction and data-movement operators.
func moreCases(r *rand.Rand) []fdCase {
	A := func(a ...*loader.Attr) []*loader.Attr { return a }
	T := func(t ...*tensor.Tensor) []*tensor.Tensor { return t }
	bnVar := pos(r, 3)
	return []fdCase{
		{name: "conv2d-pad-stride", op: "Conv", attrs: A(ias("pads", 1, 0, 1, 1), ias("strides", 2, 1)),
			in: T(rnd(r, 2, 3, 5, 4), rnd(r, 4, 3, 3, 2), rnd(r, 4))},
		{name: "conv2d-dilated-groups", op: "Conv", attrs: A(ias("dilations", 2, 1), ia("group", 2), sa("auto_pad", "SAME_UPPER")),
			in: T(rnd(r, 1, 4, 6, 5), rnd(r, 6, 2, 2, 3))},
		{name: "conv2d-depthwise", op: "Conv", attrs: A(ia("group", 3), ias("pads", 1, 1, 1, 1)),
			in: T(rnd(r, 2, 3, 4, 4), rnd(r, 3, 1, 3, 3), rnd(r, 3))},
		{name: "conv1d-dilated", op: "Conv", attrs: A(ias("dilations", 2), ias("pads", 2, 2)),
			in: T(rnd(r, 2, 2, 7), rnd(r, 3, 2, 3), rnd(r, 3))},
		{name: "conv3d", op: "Conv", attrs: A(ias("pads", 1, 0, 0, 0, 1, 0), ias("strides", 1, 2, 1)), in: T(rnd(r, 1, 2, 3, 4, 3), rnd(r, 2, 2, 2, 2, 2), rnd(r, 2))},
		{name: "convtranspose-stride-pad", op: "ConvTranspose", attrs: A(ias("strides", 2, 1), ias("pads", 1, 0, 0, 1), ias("output_padding", 1, 0)),
			in: T(rnd(r, 2, 2, 3, 3), rnd(r, 2, 3, 3, 2), rnd(r, 3))},
		{name: "convtranspose-groups-dilated", op: "ConvTranspose", attrs: A(ia("group", 2), ias("dilations", 2)),
			in: T(rnd(r, 1, 4, 4), rnd(r, 4, 1, 3), rnd(r, 2))},
		{name: "convtranspose-output-shape", op: "ConvTranspose", attrs: A(ias("strides", 2, 2), ias("output_shape", 6, 5), sa("auto_pad", "SAME_UPPER")),
			in: T(rnd(r, 1, 2, 3, 3), rnd(r, 2, 2, 3, 3))},
		{name: "maxpool2d", op: "MaxPool", opset: 12, attrs: A(ias("kernel_shape", 3, 2), ias("strides", 2, 1), ias("pads", 1, 0, 1, 1)),
			in: T(rnd(r, 2, 2, 5, 4))},
		{name: "maxpool2x2-stride2-odd", op: "MaxPool", opset: 12, attrs: A(ias("kernel_shape", 2, 2), ias("strides", 2, 2)),
			in: T(rnd(r, 2, 3, 5, 7))},
		{name: "maxpool1d-ceil", op: "MaxPool", opset: 12, attrs: A(ias("kernel_shape", 2), ias("strides", 2), ia("ceil_mode", 1)),
			in: T(rnd(r, 1, 3, 7))},
		{name: "avgpool-excl", op: "AveragePool", attrs: A(ias("kernel_shape", 3, 3), ias("strides", 2, 2), ias("pads", 1, 1, 1, 1)),
			in: T(rnd(r, 2, 2, 5, 5))},
		{name: "avgpool-incl", op: "AveragePool", attrs: A(ias("kernel_shape", 2, 3), ias("pads", 1, 1, 0, 1), ia("count_include_pad", 1)),
			in: T(rnd(r, 1, 2, 4, 5))},
		{name: "globalavg", op: "GlobalAveragePool", in: T(rnd(r, 2, 3, 4, 2))},
		{name: "globalmax", op: "GlobalMaxPool", in: T(rnd(r, 2, 3, 5))},
		{name: "batchnorm", op: "BatchNormalization", attrs: A(fa("epsilon", 1e-3)),
			in: T(rnd(r, 2, 3, 2, 2), rnd(r, 3), rnd(r, 3), rnd(r, 3), bnVar), fixed: []int{3, 4}},
		{name: "layernorm", op: "LayerNormalization", attrs: A(ia("axis", -2)),
			in: T(rnd(r, 2, 3, 4), rnd(r, 3, 4), rnd(r, 3, 4))},
		{name: "instancenorm", op: "InstanceNormalization", attrs: A(fa("epsilon", 1e-3)), in: T(rnd(r, 2, 3, 4, 2), rnd(r, 3), rnd(r, 3))},
		{name: "softmax13", op: "Softmax", opset: 13, attrs: A(ia("axis", 1)), in: T(rnd(r, 2, 3, 4))},
		{name: "softmax11", op: "Softmax", opset: 11, attrs: A(ia("axis", 1)), in: T(rnd(r, 2, 3, 4))},
		{name: "logsoftmax", op: "LogSoftmax", opset: 13, in: T(rnd(r, 3, 5))},
		{name: "reducemean-attr", op: "ReduceMean", opset: 13, attrs: A(ias("axes", -1)), in: T(rnd(r, 2, 3, 4))},
		{name: "reducemean-input", op: "ReduceMean", opset: 18, attrs: A(ia("keepdims", 0)), in: T(rnd(r, 2, 3, 4), i64(0, 2))},
		{name: "reducesum", op: "ReduceSum", opset: 13, in: T(rnd(r, 2, 3, 4), i64(1))},
		{name: "reducesum-all", op: "ReduceSum", opset: 11, attrs: A(ia("keepdims", 0)), in: T(rnd(r, 2, 3))},
		{name: "reducesumsquare", op: "ReduceSumSquare", opset: 13, attrs: A(ias("axes", 1)), in: T(rnd(r, 2, 3, 4))},
		{name: "reducemax", op: "ReduceMax", opset: 13, attrs: A(ias("axes", 0)), in: T(rnd(r, 3, 4))},
		{name: "reshape", op: "Reshape", opset: 14, in: T(rnd(r, 2, 3, 4), i64(4, -1))},
		{name: "flatten", op: "Flatten", in: T(rnd(r, 2, 3, 4))},
		{name: "squeeze", op: "Squeeze", opset: 13, in: T(rnd(r, 2, 1, 4), i64(1))},
		{name: "unsqueeze", op: "Unsqueeze", opset: 13, in: T(rnd(r, 2, 4), i64(0, 3))},
		{name: "transpose", op: "Transpose", attrs: A(ias("perm", 2, 0, 1)), in: T(rnd(r, 2, 3, 4))},
		{name: "concat", op: "Concat", attrs: A(ia("axis", 1)), in: T(rnd(r, 2, 3, 2), rnd(r, 2, 1, 2), rnd(r, 2, 2, 2))},
		{name: "split", op: "Split", opset: 13, nOut: 2, attrs: A(ia("axis", 1)), in: T(rnd(r, 2, 5), i64(2, 3))},
		{name: "slice", op: "Slice", opset: 13, in: T(rnd(r, 4, 6), i64(1, 5), i64(4, 0), i64(0, 1), i64(2, -2))},
		{name: "gather-rows", op: "Gather", in: T(rnd(r, 5, 3), tensor.From([]int64{4, 0, 4, 2}, 2, 2))},
		{name: "pad-constant", op: "Pad", opset: 13, in: T(rnd(r, 2, 3), i64(1, 0, 0, 2), tensor.From([]float64{0.7}))},
		{name: "pad-reflect", op: "Pad", opset: 13, attrs: A(sa("mode", "reflect")), in: T(rnd(r, 2, 4), i64(0, 2, 0, 1))},
		{name: "expand", op: "Expand", in: T(rnd(r, 3, 1), i64(2, 3, 4))},
		{name: "tile", op: "Tile", in: T(rnd(r, 2, 3), i64(2, 2))},
		{name: "reducemin", op: "ReduceMin", opset: 18, in: T(rnd(r, 3, 4), i64(1))},
		{name: "sin", op: "Sin", in: T(rnd(r, 3, 4))},
		{name: "dropout-inference", op: "Dropout", opset: 13, in: T(rnd(r, 3, 4))},
		{name: "cos", op: "Cos", in: T(rnd(r, 3, 4))},
		{name: "depthtospace", op: "DepthToSpace", attrs: A(ia("blocksize", 2), sa("mode", "CRD")), in: T(rnd(r, 1, 8, 2, 3))},
		{name: "spacetodepth", op: "SpaceToDepth", attrs: A(ia("blocksize", 2)), in: T(rnd(r, 1, 2, 4, 2))},
		{name: "gatherelements", op: "GatherElements", attrs: A(ia("axis", 1)), in: T(rnd(r, 3, 4), tensor.From([]int64{0, 3, 3, 1, 2, 2}, 3, 2))},
		{name: "gathernd", op: "GatherND", in: T(rnd(r, 3, 4), tensor.From([]int64{2, 1, 0, 3, 2, 1}, 3, 2))},
		{name: "resize-nearest", op: "Resize", opset: 13, in: T(rnd(r, 1, 2, 3, 2), nil, tensor.From([]float32{1, 1, 2, 1.5}, 4))},
		{name: "resize-linear-half-pixel", op: "Resize", opset: 13, attrs: A(sa("mode", "linear")), in: T(rnd(r, 1, 2, 3, 4), nil, tensor.From([]float32{1, 1, 2, 1.5}, 4))},
		{name: "resize-linear-align-corners-sizes", op: "Resize", opset: 13, attrs: A(sa("mode", "linear"), sa("coordinate_transformation_mode", "align_corners")),
			in: T(rnd(r, 1, 1, 3, 4), nil, nil, i64(1, 1, 5, 3))},
		{name: "resize-linear-asymmetric-down", op: "Resize", opset: 13, attrs: A(sa("mode", "linear"), sa("coordinate_transformation_mode", "asymmetric")),
			in: T(rnd(r, 2, 1, 5, 6), nil, tensor.From([]float32{1, 1, 0.6, 0.5}, 4))},
		{name: "resize-linear-pytorch-half-pixel", op: "Resize", opset: 13, attrs: A(sa("mode", "linear"), sa("coordinate_transformation_mode", "pytorch_half_pixel")),
			in: T(rnd(r, 1, 2, 4, 1), nil, nil, i64(1, 2, 7, 1))},
		{name: "resize-linear-tf-crop-extrapolate", op: "Resize", opset: 13, attrs: A(sa("mode", "linear"), sa("coordinate_transformation_mode", "tf_crop_and_resize"), fa("extrapolation_value", 2.5)),
			in: T(rnd(r, 1, 1, 4, 4), tensor.From([]float32{0, 0, -0.2, 0.1, 1, 1, 0.9, 1.3}, 8), nil, i64(1, 1, 3, 5))},
		{name: "resize-linear-half-pixel-symmetric", op: "Resize", opset: 19, attrs: A(sa("mode", "linear"), sa("coordinate_transformation_mode", "half_pixel_symmetric")),
			in: T(rnd(r, 1, 1, 3, 5), nil, tensor.From([]float32{1, 1, 1.7, 0.8}, 4))},
		{name: "resize-linear-antialias-down", op: "Resize", opset: 18, attrs: A(sa("mode", "linear"), ia("antialias", 1)),
			in: T(rnd(r, 1, 1, 7, 8), nil, tensor.From([]float32{1, 1, 0.45, 0.6}, 4))},
		{name: "resize-cubic-a-0.5", op: "Resize", opset: 13, attrs: A(sa("mode", "cubic"), fa("cubic_coeff_a", -0.5)),
			in: T(rnd(r, 1, 2, 4, 3), nil, tensor.From([]float32{1, 1, 1.5, 2}, 4))},
		{name: "resize-cubic-exclude-outside-antialias", op: "Resize", opset: 18, attrs: A(sa("mode", "cubic"), ia("exclude_outside", 1), ia("antialias", 1)),
			in: T(rnd(r, 1, 1, 6, 7), nil, tensor.From([]float32{1, 1, 0.5, 1.3}, 4))},
		{name: "resize-nearest-ceil-asymmetric", op: "Resize", opset: 13, attrs: A(sa("nearest_mode", "ceil"), sa("coordinate_transformation_mode", "asymmetric")),
			in: T(rnd(r, 1, 1, 4, 5), nil, tensor.From([]float32{1, 1, 0.7, 1.9}, 4))},
		{name: "resize-nearest-round-prefer-ceil-align", op: "Resize", opset: 13, attrs: A(sa("nearest_mode", "round_prefer_ceil"), sa("coordinate_transformation_mode", "align_corners")),
			in: T(rnd(r, 1, 1, 3, 4), nil, nil, i64(1, 1, 6, 3))},
		{name: "resize-axes-not-larger", op: "Resize", opset: 18, attrs: A(sa("mode", "linear"), ias("axes", 3, 2), sa("keep_aspect_ratio_policy", "not_larger")),
			in: T(rnd(r, 1, 2, 4, 5), nil, nil, i64(7, 9))},
		{name: "upsample-linear", op: "Upsample", opset: 9, attrs: A(sa("mode", "linear")), in: T(rnd(r, 1, 1, 2, 3), tensor.From([]float32{1, 1, 2, 2.5}, 4))},
		{name: "upsample-nearest", op: "Upsample", opset: 9, in: T(rnd(r, 1, 1, 2, 3), tensor.From([]float32{1, 1, 2, 2}, 4))},
		{name: "lstm-peephole-bias-state", op: "LSTM", opset: 14, nOut: 3, f32: true, attrs: A(ia("hidden_size", 3)),
			in: T(scaled(rnd(r, 4, 2, 3), 0.5), scaled(rnd(r, 1, 12, 3), 0.5), scaled(rnd(r, 1, 12, 3), 0.5), scaled(rnd(r, 1, 24), 0.5), nil,
				scaled(rnd(r, 1, 2, 3), 0.5), scaled(rnd(r, 1, 2, 3), 0.5), scaled(rnd(r, 1, 9), 0.5))},
		{name: "lstm-bidirectional", op: "LSTM", opset: 14, nOut: 2, f32: true, attrs: A(ia("hidden_size", 2), sa("direction", "bidirectional")),
			in: T(scaled(rnd(r, 3, 2, 2), 0.5), scaled(rnd(r, 2, 8, 2), 0.5), scaled(rnd(r, 2, 8, 2), 0.5), scaled(rnd(r, 2, 16), 0.5))},
		{name: "gru-state-bias", op: "GRU", opset: 14, nOut: 2, f32: true, attrs: A(ia("hidden_size", 3)),
			in: T(scaled(rnd(r, 4, 2, 3), 0.5), scaled(rnd(r, 1, 9, 3), 0.5), scaled(rnd(r, 1, 9, 3), 0.5), scaled(rnd(r, 1, 18), 0.5), nil, scaled(rnd(r, 1, 2, 3), 0.5))},
		{name: "gru-bidirectional-lbr", op: "GRU", opset: 14, nOut: 2, f32: true, attrs: A(ia("hidden_size", 2), sa("direction", "bidirectional"), ia("linear_before_reset", 1)),
			in: T(scaled(rnd(r, 3, 2, 2), 0.5), scaled(rnd(r, 2, 6, 2), 0.5), scaled(rnd(r, 2, 6, 2), 0.5), scaled(rnd(r, 2, 12), 0.5), nil, scaled(rnd(r, 2, 2, 2), 0.5))},
		{name: "rnn-bidirectional", op: "RNN", opset: 14, nOut: 2, f32: true, attrs: A(ia("hidden_size", 3), sa("direction", "bidirectional")),
			in: T(scaled(rnd(r, 4, 2, 2), 0.5), scaled(rnd(r, 2, 3, 2), 0.5), scaled(rnd(r, 2, 3, 3), 0.5), scaled(rnd(r, 2, 6), 0.5), nil, scaled(rnd(r, 2, 2, 3), 0.5))},
		{name: "where", op: "Where", in: T(tensor.From([]bool{true, false, false, true, true, false}, 2, 3), rnd(r, 2, 3), rnd(r, 3))},
	}
}

// TestNoRuleVariant: LSTM with a cell clip has no rule; the VJP says so with
// NoRule (Backward then lists the node as missing instead of failing).
func TestNoRuleVariant(t *testing.T) {
	r := rand.New(rand.NewSource(4))
	c := fdCase{name: "lstm-clip", op: "LSTM", opset: 14, attrs: []*loader.Attr{ia("hidden_size", 2), fa("clip", 3)},
		in: []*tensor.Tensor{rnd(r, 3, 1, 2), rnd(r, 1, 8, 2), rnd(r, 1, 8, 2)}}
	n := c.node()
	outs := c.forward(t, n, c.in)
	f, _ := Lookup("", "LSTM")
	g := make([][]float64, len(outs))
	for i, o := range outs {
		if o != nil {
			g[i] = make([]float64, o.Size())
		}
	}
	err := f(NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: 14}, g, nil))
	var nr *noRuleError
	if !errors.As(err, &nr) || nr.detail != "clip" {
		t.Fatalf("got %v", err)
	}
}

// TestReluMaskSpecialValues: the branch-free ReLU rule passes the gradient
// exactly where the float32 input compares > 0 (Go's own comparison is the
// reference), on signed zeros, denormals, infinities and NaNs.
func TestReluMaskSpecialValues(t *testing.T) {
	x := []float32{0, float32(math.Copysign(0, -1)), 1e-45, -1e-45, 1, -1, float32(math.Inf(1)), float32(math.Inf(-1)),
		float32(math.NaN()), -float32(math.NaN()), math.Float32frombits(0x7f800001), math.Float32frombits(0xff800001), math.MaxFloat32, -math.MaxFloat32}
	g := make([]float64, len(x))
	for i := range g {
		g[i] = float64(i) + 0.5
	}
	dst, dsq := make([]float64, len(x)), make([]float64, len(x))
	reluMask(dst, g, x)
	sq := reluMaskSq(dsq, g, x) // the same mask, and Σ g² (sumSq the reference)
	if sq != sumSq(g) && math.Abs(sq-sumSq(g)) > 1e-12*sumSq(g) {
		t.Errorf("reluMaskSq: Σ g² = %v, sumSq %v", sq, sumSq(g))
	}
	for i, v := range x {
		want := 0.0
		if v > 0 {
			want = g[i]
		}
		if dst[i] != want || dsq[i] != want {
			t.Errorf("x = %v (bits %#x): gradient %v (reluMaskSq %v), want %v", v, math.Float32bits(v), dst[i], dsq[i], want)
		}
	}
}

// TestMaxPool2x2Ties: the 2×2 stride-2 MaxPool rule sends each output's
// gradient to the first tap (row-major) equal to the recorded maximum, as
// the general rule does, on float32 planes with ties, −0 against +0 and a
// NaN maximum
// (reference: the general loop, forced by a 3-D window of the same taps).
func TestMaxPool2x2Ties(t *testing.T) {
	nan := float32(math.NaN())
	negZero := float32(math.Copysign(0, -1))
	x := []float32{1, 1, 0, 2, 5, 3,
		1, 0, 2, 2, 5, 5,
		nan, 4, 7, 7, negZero, 0,
		4, nan, 7, 7, -1, -2}
	y := []float32{1, 2, 5, nan, 7, 0} // a NaN maximum; +0 first met as −0
	g := []float64{1, 2, 3, 4, 5, 6}
	win := &window{in: []int{4, 6}, out: []int{2, 3}, k: []int{2, 2}, stride: []int{2, 2}, dil: []int{1, 1}, padBeg: []int{0, 0}}
	fillTaps(win)
	got := make([]float64, len(x))
	for i := range got {
		got[i] = 99 // the 2×2 rule writes every element
	}
	maxPoolPlanes(win, x, y, g, got, 0, 1)
	want := make([]float64, len(x))
	w3 := *win
	w3.in = []int{1, 4, 6} // same taps, not the 2-D fast path
	w3.out, w3.k, w3.stride, w3.dil, w3.padBeg = []int{1, 2, 3}, []int{1, 2, 2}, []int{1, 2, 2}, []int{1, 1, 1}, []int{0, 0, 0}
	maxPoolPlanes(&w3, x, y, g, want, 0, 1)
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("gradient %v, want %v", got, want)
		}
	}
	if want[0] != 1 || want[3] != 2 || want[4] != 3 || want[13] != 4 || want[16] != 6 {
		t.Fatalf("reference rule gave %v", want)
	}
	// odd sizes: the last row and column, in no window, get 0
	r := rand.New(rand.NewSource(9))
	x5 := make([]float32, 5*7)
	for i := range x5 {
		x5[i] = float32(r.NormFloat64())
	}
	w5 := &window{in: []int{5, 7}, out: []int{2, 3}, k: []int{2, 2}, stride: []int{2, 2}, dil: []int{1, 1}, padBeg: []int{0, 0}}
	fillTaps(w5)
	y5 := make([]float32, 6)
	for p := range y5 {
		y5[p] = float32(math.Inf(-1))
		for _, off := range w5.taps[p*4 : p*4+4] {
			y5[p] = max(y5[p], x5[off])
		}
	}
	got5 := make([]float64, len(x5))
	for i := range got5 {
		got5[i] = math.NaN()
	}
	maxPoolPlanes(w5, x5, y5, g, got5, 0, 1)
	want5 := make([]float64, len(x5))
	w53 := *w5
	w53.in, w53.out, w53.k, w53.stride, w53.dil, w53.padBeg = []int{1, 5, 7}, []int{1, 2, 3}, []int{1, 2, 2}, []int{1, 2, 2}, []int{1, 1, 1}, []int{0, 0, 0}
	maxPoolPlanes(&w53, x5, y5, g, want5, 0, 1)
	for i := range want5 {
		if got5[i] != want5[i] {
			t.Fatalf("5×7 plane: gradient %v, want %v", got5, want5)
		}
	}
}

// TestFastUnarySameAsGeneric: the float32 loops of fastUnary give exactly
// the generic derivative's results (the same float64 expressions), on
// values around every kink (±3 for HardSwish, where α·x + β crosses 0 and
// 1 for HardSigmoid), ±0, ±Inf and NaN.
func TestFastUnarySameAsGeneric(t *testing.T) {
	x := []float32{-4, -3.0000002, -3, -2.9999998, -2.5, -1, -0.5, float32(math.Copysign(0, -1)), 0, 0.3, 1, 2.4999998, 2.5, 2.5000002, 3, 3.0000002, 7,
		float32(math.Inf(1)), float32(math.Inf(-1)), float32(math.NaN())}
	for op := range fastUnary {
		c := fdCase{name: op, op: op, opset: 14, in: []*tensor.Tensor{tensor.From(append([]float32(nil), x...), len(x))}}
		n := c.node()
		outs := c.forward(t, n, c.in)
		g := make([]float64, len(x))
		for i := range g {
			g[i] = 1 + float64(i)/7
		}
		run := func(slow bool) []float64 {
			slowUnary = slow
			defer func() { slowUnary = false }()
			o := NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: 14}, [][]float64{append([]float64(nil), g...)}, nil)
			f, _ := Lookup("", op)
			if err := f(o); err != nil {
				t.Fatal(err)
			}
			return o.GIn[0]
		}
		fast, ref := run(false), run(true)
		for i := range ref {
			if math.Float64bits(fast[i]) != math.Float64bits(ref[i]) && !(math.IsNaN(fast[i]) && math.IsNaN(ref[i])) {
				t.Errorf("%s at x = %v: %v, generic rule %v", op, x[i], fast[i], ref[i])
			}
		}
	}
}
