package grad

import (
	"math"
	"math/rand"
	"path/filepath"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// f32Tensor is a float32 tensor of rnd's values (normal, ≥ 0.01 from 0).
func f32Tensor(r *rand.Rand, shape ...int) *tensor.Tensor {
	x := F64(rnd(r, shape...))
	y := make([]float32, len(x))
	for i, v := range x {
		y[i] = float32(v)
	}
	return tensor.From(y, shape...)
}

func widened(g []float32) []float64 {
	w := make([]float64, len(g))
	widen(w, g)
	return w
}

// TestRules32MatchF64: every rule of rules32 with a float32 G and float32
// gradients (Op.f32) against its float64 path (forceF64 for Conv and Gemm,
// whose float32 products are otherwise taken in both), on random float32
// inputs: relative error ‖g₃₂ − g₆₄‖/‖g₆₄‖ ≤ 1e-5 for every input's
// gradient. Bound: each element of a float32 gradient is rounded once per
// rule (2⁻²⁴ ≈ 6e-8) after sums of at most n ≤ 300 float32 products
// (convolution taps × channels), whose error grows as √n·2⁻²⁴ ≈ 1e-6. The
// float32 path must be taken: the activation input's gradient is float32.
func TestRules32MatchF64(t *testing.T) {
	r := rand.New(rand.NewSource(32))
	f := func(shape ...int) *tensor.Tensor { return f32Tensor(r, shape...) }
	f3 := func(shape ...int) *tensor.Tensor { // spread over the kinks at ±3
		x := f32Tensor(r, shape...)
		for i := range x.F32() {
			x.F32()[i] *= 3
		}
		return x
	}
	posF := func(shape ...int) *tensor.Tensor {
		p := F64(pos(r, shape...))
		y := make([]float32, len(p))
		for i, v := range p {
			y[i] = float32(v)
		}
		return tensor.From(y, shape...)
	}
	cases := []struct {
		fdCase
		need []bool
	}{
		{fdCase: fdCase{name: "conv-same3x3-bias", op: "Conv", opset: 11, attrs: []*loader.Attr{ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f(3, 8, 9, 7), f(6, 8, 3, 3), f(6)}}},
		{fdCase: fdCase{name: "conv-stride2", op: "Conv", opset: 11, attrs: []*loader.Attr{ias("strides", 2, 2), ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f(2, 16, 10, 9), f(5, 16, 3, 3)}}},
		{fdCase: fdCase{name: "conv-depthwise", op: "Conv", opset: 11, attrs: []*loader.Attr{ia("group", 6), ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f(3, 6, 7, 6), f(6, 1, 3, 3), f(6)}}},
		{fdCase: fdCase{name: "conv-depthwise-stride2-wide", op: "Conv", opset: 11, attrs: []*loader.Attr{ia("group", 4), ias("strides", 2, 2), ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f(2, 4, 9, 37), f(4, 1, 3, 3)}}},
		{fdCase: fdCase{name: "conv-depthwise-5x5-wide", op: "Conv", opset: 11, attrs: []*loader.Attr{ia("group", 3), ias("pads", 2, 2, 2, 2)}, in: []*tensor.Tensor{f(2, 3, 6, 35), f(3, 1, 5, 5)}}},
		{fdCase: fdCase{name: "conv-pad-beyond-span", op: "Conv", opset: 11, attrs: []*loader.Attr{ias("pads", 3, 0, 0, 1)}, in: []*tensor.Tensor{f(2, 3, 5, 5), f(4, 3, 2, 2)}}},
		{fdCase: fdCase{name: "bn", op: "BatchNormalization", opset: 11, in: []*tensor.Tensor{f(3, 5, 6, 7), f(5), f(5), f(5), posF(5)}}, need: []bool{true, true, true, false, false}},
		{fdCase: fdCase{name: "relu", op: "Relu", opset: 14, in: []*tensor.Tensor{f(4, 3, 5, 5)}}},
		{fdCase: fdCase{name: "add-same", op: "Add", opset: 14, in: []*tensor.Tensor{f(2, 3, 4, 5), f(2, 3, 4, 5)}}},
		{fdCase: fdCase{name: "add-bcast", op: "Add", opset: 14, in: []*tensor.Tensor{f(2, 3, 4, 5), f(3, 1, 1)}}},
		{fdCase: fdCase{name: "sub-same", op: "Sub", opset: 14, in: []*tensor.Tensor{f(2, 3, 4, 5), f(2, 3, 4, 5)}}},
		{fdCase: fdCase{name: "mul-same", op: "Mul", opset: 14, in: []*tensor.Tensor{f(2, 3, 4, 5), f(2, 3, 4, 5)}}},
		{fdCase: fdCase{name: "mul-channel", op: "Mul", opset: 14, in: []*tensor.Tensor{f(2, 3, 4, 5), f(2, 3, 1, 1)}}},
		{fdCase: fdCase{name: "mul-channel-first", op: "Mul", opset: 14, in: []*tensor.Tensor{f(2, 3, 1, 1), f(2, 3, 4, 5)}}},
		{fdCase: fdCase{name: "maxpool-2x2", op: "MaxPool", opset: 12, attrs: []*loader.Attr{ias("kernel_shape", 2, 2), ias("strides", 2, 2)}, in: []*tensor.Tensor{f(2, 3, 9, 8)}}},
		{fdCase: fdCase{name: "maxpool-3x3s2", op: "MaxPool", opset: 12, attrs: []*loader.Attr{ias("kernel_shape", 3, 3), ias("strides", 2, 2), ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f(2, 3, 9, 8)}}},
		{fdCase: fdCase{name: "avgpool", op: "AveragePool", opset: 11, attrs: []*loader.Attr{ias("kernel_shape", 3, 3), ias("strides", 2, 2), ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f(2, 3, 9, 8)}}},
		{fdCase: fdCase{name: "gap", op: "GlobalAveragePool", opset: 11, in: []*tensor.Tensor{f(2, 3, 9, 8)}}},
		{fdCase: fdCase{name: "flatten", op: "Flatten", opset: 11, in: []*tensor.Tensor{f(2, 3, 2, 2)}}},
		{fdCase: fdCase{name: "reshape", op: "Reshape", opset: 14, in: []*tensor.Tensor{f(2, 3, 4), i64(6, 4)}}},
		{fdCase: fdCase{name: "identity", op: "Identity", opset: 14, in: []*tensor.Tensor{f(2, 3, 4)}}},
		{fdCase: fdCase{name: "gemm-transB-bias", op: "Gemm", opset: 11, attrs: []*loader.Attr{ia("transB", 1)}, in: []*tensor.Tensor{f(5, 40), f(7, 40), f(7)}}},
		{fdCase: fdCase{name: "gemm-transA", op: "Gemm", opset: 11, attrs: []*loader.Attr{ia("transA", 1), fa("alpha", 0.5)}, in: []*tensor.Tensor{f(40, 5), f(40, 7)}}},
		{fdCase: fdCase{name: "hardswish", op: "HardSwish", opset: 14, in: []*tensor.Tensor{f3(4, 50)}}},
		{fdCase: fdCase{name: "hardsigmoid", op: "HardSigmoid", opset: 14, in: []*tensor.Tensor{f3(4, 50)}}},
		{fdCase: fdCase{name: "sigmoid", op: "Sigmoid", opset: 14, in: []*tensor.Tensor{f(4, 50)}}},
		{fdCase: fdCase{name: "tanh", op: "Tanh", opset: 14, in: []*tensor.Tensor{f(4, 50)}}},
		{fdCase: fdCase{name: "clip", op: "Clip", opset: 13, in: []*tensor.Tensor{f(4, 50), tensor.From([]float32{-0.5}), tensor.From([]float32{0.7})}}},
	}
	for _, c := range cases {
		if !rules32[c.op] {
			t.Fatalf("%s: %s is not in rules32", c.name, c.op)
		}
		n := c.node()
		outs := c.forward(t, n, c.in)
		g32 := f32Tensor(r, outs[0].Size()).F32()
		f, _ := Lookup("", c.op)
		run := func(use32 bool) *Op {
			forceF64 = !use32
			defer func() { forceF64 = false }()
			need := c.need
			if need == nil {
				need = make([]bool, len(c.in))
				for i, x := range c.in {
					need[i] = x != nil && isFloat(x)
				}
			}
			var o *Op
			if use32 {
				o = NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: c.opset}, make([][]float64, len(outs)), need)
				o.GOut32 = [][]float32{append([]float32(nil), g32...)}
				o.f32 = true
			} else {
				o = NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: c.opset}, [][]float64{widened(g32)}, need)
			}
			o.wantSq = sqRules[c.op]
			if err := f(o); err != nil {
				t.Fatalf("%s: %v", c.name, err)
			}
			return o
		}
		got, ref := run(true), run(false)
		// (a convolution whose padding spans a whole window keeps the
		// float64 columns' path for dX)
		if got.GIn32[0] == nil && c.name != "conv-pad-beyond-span" {
			t.Errorf("%s: the activation's gradient is not float32", c.name)
		}
		if ref.gsqOK && got.gsqOK && math.Abs(got.gsq-ref.gsq) > 1e-12*ref.gsq {
			// the same float32 G in both: Σ G² in float64 differs only by the order of additions
			t.Errorf("%s: Σ G² %g, float64 path %g", c.name, got.gsq, ref.gsq)
		}
		for i := range c.in {
			want := ref.GIn[i]
			g := got.GIn[i]
			if got.GIn32[i] != nil {
				g = widened(got.GIn32[i])
			}
			if (g == nil) != (want == nil) {
				t.Errorf("%s input %d: gradient %v, float64 path %v", c.name, i, g != nil, want != nil)
				continue
			}
			if e := relErr(g, want, 0); e > 1e-5 || math.IsNaN(e) {
				t.Errorf("%s input %d: relative error %.2g against the float64 path", c.name, i, e)
			}
		}
	}
}

// TestBatchNormMask32: BatchNormalization's float32 rule with the ReLU
// above it folded in (Op.mask) against the float64 rule fed G masked
// first (the ReLU's rule): relative error ≤ 1e-5 (dX rounded once to
// float32: 2⁻²⁴), the raw Σ G² (before the mask) within 1e-12 (float64
// sums of the same values).
func TestBatchNormMask32(t *testing.T) {
	r := rand.New(rand.NewSource(33))
	c := fdCase{name: "bn", op: "BatchNormalization", opset: 11, in: []*tensor.Tensor{f32Tensor(r, 3, 4, 5, 6), f32Tensor(r, 4), f32Tensor(r, 4), f32Tensor(r, 4), tensor.From([]float32{0.5, 1, 2, 1.5}, 4)}}
	n := c.node()
	outs := c.forward(t, n, c.in)
	mask := f32Tensor(r, outs[0].Size()).F32()
	g32 := f32Tensor(r, outs[0].Size()).F32()
	need := []bool{true, true, true, false, false}
	o := NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: 11}, make([][]float64, 1), need)
	o.GOut32 = [][]float32{append([]float32(nil), g32...)}
	o.f32, o.wantSq, o.mask = true, true, mask
	if err := batchNormVJP(o); err != nil {
		t.Fatal(err)
	}
	masked := make([]float64, len(g32))
	raw := 0.0
	for i, v := range g32 {
		raw += float64(v) * float64(v)
		masked[i] = reluPass(float64(v), mask[i])
	}
	ref := NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: 11}, [][]float64{masked}, need)
	if err := batchNormVJP(ref); err != nil {
		t.Fatal(err)
	}
	if !o.rawSqOK || math.Abs(o.rawSq-raw) > 1e-12*raw {
		t.Errorf("raw Σ G² %g, want %g", o.rawSq, raw)
	}
	if e := relErr(widened(o.GIn32[0]), ref.GIn[0], 0); e > 1e-5 {
		t.Errorf("dX: relative error %.2g", e)
	}
	for i := 1; i < 3; i++ {
		if e := relErr(o.GIn[i], ref.GIn[i], 0); e > 1e-5 {
			t.Errorf("input %d: relative error %.2g", i, e)
		}
	}
}

// TestTapeFloat32: the backward pass of float32 models with float32
// gradients against the same pass in float64 (Tape.only64): dL/dW of every
// weight within 1e-5 relative (per rule one float32 rounding of each
// element, 2⁻²⁴, over about 25 rules and sums of float32 products already
// taken in both: the bound is a few 1e-7, 1e-5 leaves room), and no
// gradient of resnet_tiny, vgg_bn or mobile_hardswish widened back to
// float64 (every rule on their chains has a float32 path: a regression
// check of rules32).
func TestTapeFloat32(t *testing.T) {
	dir := refDir(t)
	for _, name := range []string{"resnet_tiny", "vgg_bn", "mobile_hardswish"} {
		m, err := loader.LoadModel(filepath.Join(dir, name+".onnx"))
		if err != nil {
			t.Fatal(err)
		}
		x, err := loader.ReadNpy(filepath.Join(dir, name+".input.npy"))
		if err != nil {
			t.Fatal(err)
		}
		tape, out := runBatch(t, m, x)
		_, seed, err := CrossEntropy(out, make([]int64, out.Shape[0]), false)
		if err != nil {
			t.Fatal(err)
		}
		pass := func(only64 bool) (*Result, map[string]float64) {
			tape.only64 = only64
			sq := map[string]float64{}
			res, err := tape.BackwardSq(map[string][]float64{m.Graph.Outputs[0].Name: seed}, func(_ int, v string, _ int, s float64) { sq[v] = s })
			if err != nil {
				t.Fatal(err)
			}
			return res, sq
		}
		ref, refSq := pass(true)
		got, gotSq := pass(false)
		if tape.Widened != 0 {
			t.Errorf("%s: %d float32 gradients widened to float64", name, tape.Widened)
		}
		if len(got.Params) != len(ref.Params) || len(ref.Params) == 0 {
			t.Fatalf("%s: %d weight gradients, float64 pass %d", name, len(got.Params), len(ref.Params))
		}
		for p, want := range ref.Params {
			if e := relErr(got.Params[p], want, 0); e > 1e-5 || math.IsNaN(e) {
				t.Errorf("%s %s: relative error %.2g", name, p, e)
			}
		}
		// Σ g² per value: relative error ≤ 2e-5 (twice the gradients')
		for v, want := range refSq {
			if math.Abs(gotSq[v]-want) > 2e-5*want {
				t.Errorf("%s %s: Σ g² %g, float64 pass %g", name, v, gotSq[v], want)
			}
		}
	}
}

// TestBnPlaneVecSameAsGo: bnPlane32's vector loop (bnPlaneVec) against its
// Go loop on planes of 16k and 16k + tail elements, with a mask holding
// ±0, ±Inf, NaN and negatives, d separate or G itself: d bitwise equal
// (the same float32 product G·k in both), the sums within 1e-12 relative
// (float64 sums of the same terms in another order: about n·2⁻⁵³, common
// practice for a few hundred terms). And masking inside the rule gives the
// same bits as masking first (the ReLU's rule, reluMaskSq32) then running
// it unmasked: the fused and unfused passes agree exactly.
func TestBnPlaneVecSameAsGo(t *testing.T) {
	r := rand.New(rand.NewSource(34))
	special := []float32{0, float32(math.Copysign(0, -1)), float32(math.Inf(1)), float32(math.Inf(-1)), float32(math.NaN()), -1, 1e-38}
	for _, n := range []int{16, 48, 53, 256, 7} {
		g := f32Tensor(r, n).F32()
		x := f32Tensor(r, n).F32()
		m := f32Tensor(r, n).F32()
		for i := 0; i < n; i += 3 {
			m[i] = special[(i/3)%len(special)]
		}
		k := float32(0.7)
		for _, masked := range []bool{false, true} {
			for _, inPlace := range []bool{false, true} {
				var mm []float32
				if masked {
					mm = m
				}
				run := func(vec bool) (bnSums, []float32) {
					defer func(h bool) { haveBN512 = h }(haveBN512)
					haveBN512 = haveBN512 && vec
					gc := append([]float32(nil), g...)
					d := make([]float32, n)
					if inPlace {
						d = gc
					}
					return bnPlane32(gc, mm, x, d, k, new([10][8]float64)), d
				}
				got, dv := run(true)
				ref, dg := run(false)
				for i := range dg {
					if math.Float32bits(dv[i]) != math.Float32bits(dg[i]) {
						t.Fatalf("n %d masked %v: d[%d] = %v, Go loop %v", n, masked, i, dv[i], dg[i])
					}
				}
				for _, p := range [][2]float64{{got.sum, ref.sum}, {got.sumX, ref.sumX}, {got.sumSq, ref.sumSq}, {got.rawSq, ref.rawSq}, {got.outSq, ref.outSq}} {
					if math.Abs(p[0]-p[1]) > 1e-12*(math.Abs(p[1])+1e-300) && !(math.IsInf(p[1], 0) && p[0] == p[1]) {
						t.Errorf("n %d masked %v in place %v: sums %+v, Go loop %+v", n, masked, inPlace, got, ref)
						break
					}
				}
			}
		}
		// fused against masked first, on whichever loop runs here
		gm := append([]float32(nil), g...)
		reluMaskSq32(gm, gm, m)
		fused := bnPlane32(append([]float32(nil), g...), m, x, make([]float32, n), 0.7, new([10][8]float64))
		first := bnPlane32(gm, nil, x, make([]float32, n), 0.7, new([10][8]float64))
		if fused.sum != first.sum || fused.sumX != first.sumX || fused.sumSq != first.sumSq || fused.outSq != first.outSq {
			t.Errorf("n %d: masked in the rule %+v, masked first %+v", n, fused, first)
		}
	}
}

// TestHardSwishVecMatchesGo: HardSwish's float32 rule by the vector loop
// (hardSwishVec) against the Go loop (the float64 expression rounded once)
// on values around the kinks ±3, ±0, ±Inf and NaN and random ones: each
// element within 2⁻²²·|G| (d(x) ≤ 1.5 in magnitude, taken in float32 with
// one rounding of 1/3 and one of the fused multiply-add: a few 2⁻²⁴), the
// same branch at every kink, and Σ G² within 1e-12 (the order of additions).
func TestHardSwishVecMatchesGo(t *testing.T) {
	r := rand.New(rand.NewSource(35))
	x := []float32{-4, -3.0000002, -3, -2.9999998, -2.5, -1.5, -1, -0.5, float32(math.Copysign(0, -1)), 0, 0.3, 1, 2.9999998, 3, 3.0000002, 7,
		float32(math.Inf(1)), float32(math.Inf(-1)), float32(math.NaN())}
	for len(x) < 16*5+3 {
		x = append(x, float32(r.NormFloat64()*3))
	}
	g := f32Tensor(r, len(x)).F32()
	run := func(vec bool) ([]float32, float64) {
		defer func(h bool) { haveBN512 = h }(haveBN512)
		haveBN512 = haveBN512 && vec
		d := make([]float32, len(g))
		return d, hardSwish32(d, g, x, nil)
	}
	dv, sv := run(true)
	dg, sg := run(false)
	for i := range dg {
		if math.Abs(float64(dv[i]-dg[i])) > math.Ldexp(math.Abs(float64(g[i])), -22) || math.IsNaN(float64(dv[i])) {
			t.Errorf("x = %v: %v, Go loop %v", x[i], dv[i], dg[i])
		}
	}
	if math.Abs(sv-sg) > 1e-12*sg {
		t.Errorf("Σ G² %v, Go loop %v", sv, sg)
	}
}

// TestDepthwise32VecSameAsGo: the depthwise rule's vector loop over unit
// runs (dwRunsVec) against its Go loop, dX and dW of planes whose runs are
// shorter and longer than 16 (tails under the load mask), stride 1 and 2:
// relative error ≤ 1e-6 (float32 products summed in float32 lanes instead
// of float64: about √(P/16)·2⁻²⁴ per lane, far below).
func TestDepthwise32VecSameAsGo(t *testing.T) {
	r := rand.New(rand.NewSource(36))
	for _, c := range []fdCase{
		{name: "s1", attrs: []*loader.Attr{ia("group", 3), ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f32Tensor(r, 2, 3, 7, 37), f32Tensor(r, 3, 1, 3, 3)}},
		{name: "s2", attrs: []*loader.Attr{ia("group", 2), ias("strides", 2, 2), ias("pads", 1, 1, 1, 1)}, in: []*tensor.Tensor{f32Tensor(r, 2, 2, 8, 20), f32Tensor(r, 2, 1, 3, 3)}},
		{name: "k5-narrow", attrs: []*loader.Attr{ia("group", 2), ias("pads", 2, 2, 2, 2)}, in: []*tensor.Tensor{f32Tensor(r, 3, 2, 5, 5), f32Tensor(r, 2, 1, 5, 5)}},
	} {
		c.op, c.opset = "Conv", 11
		n := c.node()
		outs := c.forward(t, n, c.in)
		o := NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: 11}, nil, nil)
		win, err := windowOf(o, c.in[0], outs[0], c.in[1].Shape[2:])
		if err != nil {
			t.Fatal(err)
		}
		N, C := c.in[0].Shape[0], c.in[0].Shape[1]
		g := f32Tensor(r, outs[0].Size()).F32()
		run := func(vec bool) ([]float32, []float64) {
			defer func(h bool) { haveBN512 = h }(haveBN512)
			haveBN512 = haveBN512 && vec
			gx, gw := make([]float32, c.in[0].Size()), make([]float64, c.in[1].Size())
			depthwise32(win, N, C, c.in[0].F32(), c.in[1].F32(), g, gx, gw)
			return gx, gw
		}
		vx, vw := run(true)
		rx, rw := run(false)
		if e := relErr(widened(vx), widened(rx), 0); e > 1e-6 {
			t.Errorf("%s: dX relative error %.2g", c.name, e)
		}
		if e := relErr(vw, rw, 0); e > 1e-6 {
			t.Errorf("%s: dW relative error %.2g", c.name, e)
		}
	}
}

// TestMaxPool2x2VecSameAsGo: the 2×2 max-pool rule on float32 gradients
// by the vector loop (maxPool2x2RowVec) against the Go loop and against
// the general rule (maxPoolPlanes through a 3-D window of the same taps),
// bitwise: planes of 3..41 columns (rows of 1..20 windows: the load and
// store masks, an odd last column), values drawn from {−1, −0, 0, 1, 2}
// (ties everywhere, −0 against +0) and a row with a NaN maximum (the
// vector loop gives the row back to the Go loop).
func TestMaxPool2x2VecSameAsGo(t *testing.T) {
	r := rand.New(rand.NewSource(37))
	vals := []float32{-1, float32(math.Copysign(0, -1)), 0, 1, 2}
	for _, W := range []int{3, 4, 17, 32, 33, 41} {
		H := 6
		win := &window{in: []int{H, W}, out: []int{H / 2, W / 2}, k: []int{2, 2}, stride: []int{2, 2}, dil: []int{1, 1}, padBeg: []int{0, 0}}
		fillTaps(win)
		x := make([]float32, H*W)
		for i := range x {
			x[i] = vals[r.Intn(len(vals))]
		}
		if W > 30 {
			x[2*W+5] = float32(math.NaN()) // row 1 of windows: a NaN maximum
		}
		y := make([]float32, win.P)
		for p := range y {
			y[p] = float32(math.Inf(-1))
			for _, off := range win.taps[p*4 : p*4+4] {
				if x[off] > y[p] || x[off] != x[off] {
					y[p] = x[off]
				}
			}
		}
		g := f32Tensor(r, win.P).F32()
		run := func(vec bool) []float32 {
			defer func(h bool) { haveBN512 = h }(haveBN512)
			haveBN512 = haveBN512 && vec
			d := make([]float32, H*W)
			for i := range d {
				d[i] = 99 // every element is written
			}
			maxPoolPlanes(win, x, y, g, d, 0, 1)
			return d
		}
		got, ref := run(true), run(false)
		want := make([]float32, H*W)
		w3 := *win
		w3.in, w3.out, w3.k, w3.stride, w3.dil, w3.padBeg = []int{1, H, W}, []int{1, H / 2, W / 2}, []int{1, 2, 2}, []int{1, 2, 2}, []int{1, 1, 1}, []int{0, 0, 0}
		fillTaps(&w3)
		maxPoolPlanes(&w3, x, y, g, want, 0, 1)
		for i := range ref {
			if math.Float32bits(got[i]) != math.Float32bits(ref[i]) || math.Float32bits(ref[i]) != math.Float32bits(want[i]) {
				t.Fatalf("W %d, element %d: vector %v, Go loop %v, general rule %v", W, i, got[i], ref[i], want[i])
			}
		}
	}
}

// TestPadChannelLastVec: the channel-last copy of dW's input by the 8×8
// vector blocks (padBlocks8) against the Go loop, bitwise, for channel
// counts with and without a tail of 1..7 and position counts with a tail:
// the padded positions (zeros) cleared, every input value moved.
func TestPadChannelLastVec(t *testing.T) {
	r := rand.New(rand.NewSource(38))
	for _, c := range []struct{ C, H, W, pad int }{{16, 8, 8, 1}, {8, 4, 4, 0}, {13, 5, 7, 1}, {24, 6, 9, 2}, {3, 9, 9, 1}} {
		I := c.H * c.W
		Wp := c.W + 2*c.pad
		Ip := (c.H + 2*c.pad) * Wp
		padAt := make([]int, I)
		isIn := make([]bool, Ip)
		for i := range padAt {
			padAt[i] = (i/c.W+c.pad)*Wp + i%c.W + c.pad
			isIn[padAt[i]] = true
		}
		var zeros []int
		for q, in := range isIn {
			if !in {
				zeros = append(zeros, q)
			}
		}
		x := f32Tensor(r, c.C*I).F32()
		run := func(vec bool) []float32 {
			defer func(h bool) { havePadAVX = h }(havePadAVX)
			havePadAVX = havePadAVX && vec
			d := make([]float32, Ip*c.C)
			for i := range d {
				d[i] = float32(math.NaN())
			}
			padChannelLast(d, x, c.C, I, padAt, zeros)
			return d
		}
		got, want := run(true), run(false)
		for i := range want {
			if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
				t.Fatalf("%+v: element %d = %v, Go loop %v", c, i, got[i], want[i])
			}
		}
		if c.C > 5 && x[5*I+3] != want[padAt[3]*c.C+5] {
			t.Fatalf("%+v: the Go loop does not put x[5, 3] at position 3, channel 5", c)
		}
	}
}

// TestSum32Vec: Σ of float32 values in float64 by the vector loop against
// the Go loop, lengths with and without a tail: within 1e-12 relative
// (float64 sums of the same terms in another order; common practice).
func TestSum32Vec(t *testing.T) {
	r := rand.New(rand.NewSource(39))
	for _, n := range []int{16, 17, 100, 1024, 5} {
		g := f32Tensor(r, n).F32()
		got := sum32(g)
		want := sum32Go(g)
		scale := 0.0
		for _, v := range g {
			scale += math.Abs(float64(v))
		}
		if math.Abs(got-want) > 1e-12*scale {
			t.Errorf("n %d: %v, Go loop %v", n, got, want)
		}
	}
}
