package grad

import (
	"fmt"
	"math"
	"math/rand"
	"slices"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// The finite-difference check: every VJP against central differences of the
// operator's own forward kernel (probe, run in float64). The scalar is
// L = Σ w·y over every float output with fixed random weights w, so the
// VJP is given G = w. For each input element, (L(x+h) − L(x−h)) / 2h has a
// truncation error ≤ h²/6·|L”'| and a rounding error ≤ ε·Σ|w·y|/h; with
// h = 1e-5, ε = 2.2e-16 and |L”'|, Σ|w·y| below 1e3 on these small inputs
// both are below 2e-7, so the tolerance is 1e-6·(1 + |dL/dx|). Inputs stay
// 0.01 away from kinks (ReLU at 0, Clip bounds) by construction.
const fdStep = 1e-5

type fdCase struct {
	name  string
	op    string
	opset int
	attrs []*loader.Attr
	in    []*tensor.Tensor // float64 inputs are differentiated; others are fixed
	nOut  int
	// fixed are inputs the operator treats as constants (BatchNormalization's
	// running statistics in inference mode): not differentiated.
	fixed []int
	// f32 marks a forward kernel that computes in float32 whatever the
	// input type (probe's RNN, GRU, LSTM): the step is then 1e-3, where the
	// float32 rounding error ε₃₂·Σ|w·y|/h (6e-8·Σ|w·y|/1e-3) and the
	// truncation error h²/6·|L'''| stay below 5e-4 on these inputs, and the
	// tolerance 2e-3·(1 + |dL/dx|).
	f32 bool
}

func fa(name string, v float32) *loader.Attr {
	return &loader.Attr{Name: name, Kind: loader.AttrFloat, F: v}
}
func ia(name string, v int64) *loader.Attr {
	return &loader.Attr{Name: name, Kind: loader.AttrInt, I: v}
}
func sa(name, v string) *loader.Attr { return &loader.Attr{Name: name, Kind: loader.AttrString, S: v} }
func ias(name string, v ...int64) *loader.Attr {
	return &loader.Attr{Name: name, Kind: loader.AttrInts, Ints: v}
}

// rnd is a float64 tensor of normal values at least 0.01 from zero.
func rnd(r *rand.Rand, shape ...int) *tensor.Tensor {
	n := 1
	for _, d := range shape {
		n *= d
	}
	x := make([]float64, n)
	for i := range x {
		v := r.NormFloat64()
		for math.Abs(v) < 0.01 {
			v = r.NormFloat64()
		}
		x[i] = v
	}
	return tensor.From(x, shape...)
}

// pos is a float64 tensor of values in [0.5, 2).
func pos(r *rand.Rand, shape ...int) *tensor.Tensor {
	t := rnd(r, shape...)
	for i, v := range t.F64() {
		t.F64()[i] = 0.5 + math.Mod(math.Abs(v), 1.5)
	}
	return t
}

func i64(v ...int64) *tensor.Tensor { return tensor.From(v, len(v)) }

func (c fdCase) node() *loader.Node {
	n := &loader.Node{Name: c.name, OpType: c.op, Attrs: map[string]*loader.Attr{}}
	for i := range c.in {
		n.Inputs = append(n.Inputs, fmt.Sprintf("x%d", i))
		if c.in[i] == nil {
			n.Inputs[i] = ""
		}
	}
	for j := 0; j < max(c.nOut, 1); j++ {
		n.Outputs = append(n.Outputs, fmt.Sprintf("y%d", j))
	}
	for _, a := range c.attrs {
		n.Attrs[a.Name] = a
	}
	return n
}

func (c fdCase) forward(t *testing.T, n *loader.Node, in []*tensor.Tensor) []*tensor.Tensor {
	k, ok := probe.Lookup("", c.op, c.opset)
	if !ok {
		t.Fatalf("%s: no kernel for %s at opset %d", c.name, c.op, c.opset)
	}
	call := &probe.Call{Node: n, In: in, Out: make([]*tensor.Tensor, len(n.Outputs)), Opset: c.opset}
	if err := k(call); err != nil {
		t.Fatalf("%s forward: %v", c.name, err)
	}
	return call.Out
}

func weighted(outs []*tensor.Tensor, w [][]float64) float64 {
	s := 0.0
	for j, o := range outs {
		if w[j] == nil {
			continue
		}
		for k, v := range o.F64() {
			s += w[j][k] * v
		}
	}
	return s
}

func runFD(t *testing.T, c fdCase) {
	t.Helper()
	if c.opset == 0 {
		c.opset = 17
	}
	n := c.node()
	outs := c.forward(t, n, c.in)
	r := rand.New(rand.NewSource(7))
	w := make([][]float64, len(outs))
	for j, o := range outs {
		if o != nil && o.DType == tensor.Float64 {
			w[j] = F64(rnd(r, o.Size()))
		}
	}
	f, ok := Lookup("", c.op)
	if !ok {
		t.Fatalf("%s: no VJP for %s", c.name, c.op)
	}
	gOut := make([][]float64, len(w)) // a copy: VJPs may overwrite GOut (InPlace)
	for j := range w {
		gOut[j] = append([]float64(nil), w[j]...)
	}
	op := NewOp(&probe.Call{Node: n, In: c.in, Out: outs, Opset: c.opset}, gOut, nil)
	if err := f(op); err != nil {
		t.Fatalf("%s VJP: %v", c.name, err)
	}
	checked := 0
	for i, x := range c.in {
		if x == nil || x.DType != tensor.Float64 || slices.Contains(c.fixed, i) {
			continue
		}
		got := op.GIn[i]
		if got == nil {
			got = make([]float64, x.Size())
		}
		for k := range x.F64() {
			in := make([]*tensor.Tensor, len(c.in))
			copy(in, c.in)
			xp := x.Clone()
			in[i] = xp
			v := xp.F64()[k]
			h, tol := fdStep, 1e-6
			if c.f32 {
				h, tol = 1e-3, 2e-3
			}
			xp.F64()[k] = v + h
			lp := weighted(c.forward(t, n, in), w)
			xp.F64()[k] = v - h
			lm := weighted(c.forward(t, n, in), w)
			want := (lp - lm) / (2 * h)
			if math.Abs(got[k]-want) > tol*(1+math.Abs(want)) {
				t.Errorf("%s: dL/d(input %d)[%d] = %.9g, central difference %.9g", c.name, i, k, got[k], want)
				return
			}
			checked++
		}
	}
	if checked == 0 {
		t.Fatalf("%s: nothing checked", c.name)
	}
}

func TestVJPFiniteDifferences(t *testing.T) {
	r := rand.New(rand.NewSource(1))
	cases := []fdCase{
		{name: "relu", op: "Relu", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "leakyrelu", op: "LeakyRelu", attrs: []*loader.Attr{fa("alpha", 0.1)}, in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "elu", op: "Elu", attrs: []*loader.Attr{fa("alpha", 0.7)}, in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "selu", op: "Selu", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "celu", op: "Celu", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "sigmoid", op: "Sigmoid", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "tanh", op: "Tanh", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "hardsigmoid", op: "HardSigmoid", in: []*tensor.Tensor{rnd(r, 4, 5)}},
		{name: "hardswish", op: "HardSwish", in: []*tensor.Tensor{scaled(rnd(r, 4, 5), 3)}},
		{name: "softplus", op: "Softplus", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "softsign", op: "Softsign", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "mish", op: "Mish", opset: 18, in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "gelu", op: "Gelu", opset: 20, in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "gelu-tanh", op: "Gelu", opset: 20, attrs: []*loader.Attr{sa("approximate", "tanh")}, in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "erf", op: "Erf", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "exp", op: "Exp", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "log", op: "Log", in: []*tensor.Tensor{pos(r, 3, 4)}},
		{name: "sqrt", op: "Sqrt", in: []*tensor.Tensor{pos(r, 3, 4)}},
		{name: "reciprocal", op: "Reciprocal", in: []*tensor.Tensor{pos(r, 3, 4)}},
		{name: "neg", op: "Neg", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "abs", op: "Abs", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "identity", op: "Identity", in: []*tensor.Tensor{rnd(r, 3, 4)}},
		{name: "clip", op: "Clip", in: []*tensor.Tensor{rnd(r, 3, 4), tensor.From([]float64{-0.505}), tensor.From([]float64{0.705})}},
		{name: "add-bcast", op: "Add", in: []*tensor.Tensor{rnd(r, 2, 3, 4), rnd(r, 3, 1)}},
		{name: "sub-bcast", op: "Sub", in: []*tensor.Tensor{rnd(r, 4), rnd(r, 2, 3, 4)}},
		{name: "mul-bcast", op: "Mul", in: []*tensor.Tensor{rnd(r, 2, 1, 4), rnd(r, 3, 1)}},
		{name: "div-bcast", op: "Div", in: []*tensor.Tensor{rnd(r, 2, 3, 4), pos(r, 1, 3, 1)}},
		{name: "pow", op: "Pow", in: []*tensor.Tensor{pos(r, 2, 3), rnd(r, 3)}},
		{name: "prelu", op: "PRelu", in: []*tensor.Tensor{rnd(r, 2, 3, 4), rnd(r, 3, 1)}},
		{name: "sum3", op: "Sum", in: []*tensor.Tensor{rnd(r, 2, 3), rnd(r, 3), rnd(r, 2, 1)}},
		{name: "mean2", op: "Mean", in: []*tensor.Tensor{rnd(r, 2, 3), rnd(r, 3)}},
		{name: "gemm", op: "Gemm", in: []*tensor.Tensor{rnd(r, 3, 4), rnd(r, 4, 5), rnd(r, 5)}},
		{name: "gemm-tt", op: "Gemm", attrs: []*loader.Attr{ia("transA", 1), ia("transB", 1), fa("alpha", 0.5), fa("beta", 2)},
			in: []*tensor.Tensor{rnd(r, 4, 3), rnd(r, 5, 4), rnd(r, 3, 1)}},
		{name: "gemm-ta", op: "Gemm", attrs: []*loader.Attr{ia("transA", 1)}, in: []*tensor.Tensor{rnd(r, 4, 3), rnd(r, 4, 5)}},
		{name: "gemm-tb", op: "Gemm", attrs: []*loader.Attr{ia("transB", 1)}, in: []*tensor.Tensor{rnd(r, 3, 4), rnd(r, 5, 4), rnd(r, 1)}},
		{name: "matmul-2d", op: "MatMul", in: []*tensor.Tensor{rnd(r, 3, 4), rnd(r, 4, 2)}},
		{name: "matmul-batch-bcast", op: "MatMul", in: []*tensor.Tensor{rnd(r, 2, 1, 3, 4), rnd(r, 3, 4, 2)}},
		{name: "matmul-1d", op: "MatMul", in: []*tensor.Tensor{rnd(r, 4), rnd(r, 2, 4, 3)}},
		{name: "matmul-vec", op: "MatMul", in: []*tensor.Tensor{rnd(r, 2, 3, 4), rnd(r, 4)}},
	}
	cases = append(cases, moreCases(r)...)
	covered := map[string]bool{}
	for _, c := range cases {
		covered[c.op] = true
		t.Run(c.name, func(t *testing.T) { runFD(t, c) })
	}
	// every registered VJP has a case
	for _, op := range Ops() {
		if !covered[op] {
			t.Errorf("VJP of %s has no finite-difference case", op)
		}
	}
}

func scaled(t *tensor.Tensor, s float64) *tensor.Tensor {
	for i := range t.F64() {
		t.F64()[i] *= s
	}
	return t
}
