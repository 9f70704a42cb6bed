// Package actkind is the one list of the ONNX activation operators vitals
// knows, shared by the statistics (which unit statistics a layer gets and
// which reference gain its weights are judged against), the plots (which
// layers are activation layers) and the executor's fusion of an activation
// into the convolution that produces its input.
//
// It imports nothing, so every package can use it whatever its place in the
// import order (docs/design.md). Activations that an exporter writes as a
// small subgraph rather than one operator (GELU as x·½·(1+erf(x/√2)), SiLU as
// x·sigmoid(x)) are recognised in the graph by the statistics and reported
// under the names Gelu and Swish listed here.
package actkind

import "sort"

// Family says which unit statistics an activation's output gets.
type Family int

// Activation families.
const (
	// None: not an activation.
	None Family = iota
	// ReLU: piecewise linear, zero or a linear slope below 0 (Relu,
	// LeakyRelu, PRelu, ThresholdedRelu). A unit is dead when it is never
	// > 0 on the sample.
	ReLU
	// Smooth: smooth ReLU-like units whose output is > 0 exactly when the
	// input is > 0 (Gelu, Swish/SiLU, Mish, Elu, Celu, Selu, HardSwish). A
	// unit that is never > 0 saw only negative inputs: it is counted dead
	// like a ReLU unit, though it still passes a small gradient.
	Smooth
	// Bounded: outputs that approach limits where the derivative vanishes
	// (Tanh, Sigmoid, HardSigmoid, Softsign, Softplus's lower limit 0). The
	// share of outputs at the limits is the saturated fraction.
	Bounded
	// Clip: a ReLU6-like unit when the lower bound is 0, a hard tanh when
	// both bounds are finite; it depends on the bounds.
	Clip
)

// Op describes one activation operator.
type Op struct {
	Name   string
	Family Family
	// HeGain: the reference gain std·√fan_in of the weights before it is
	// √2 (He et al. 2015 derive it for ReLU; the ReLU-like units are
	// treated the same, common practice); otherwise 1 (Glorot & Bengio
	// 2010).
	HeGain bool
	// Fusable: the executor may compute it inside the convolution that
	// produces its input (probe/fuse.go holds the float32 function).
	Fusable bool
}

// ops is the list, by ONNX operator name.
var ops = map[string]Op{
	"Relu":            {Family: ReLU, HeGain: true, Fusable: true},
	"LeakyRelu":       {Family: ReLU, HeGain: true, Fusable: true},
	"PRelu":           {Family: ReLU, HeGain: true},
	"ThresholdedRelu": {Family: ReLU, HeGain: true},
	"Gelu":            {Family: Smooth, HeGain: true},
	"Swish":           {Family: Smooth, HeGain: true},
	"Mish":            {Family: Smooth, HeGain: true},
	"Elu":             {Family: Smooth, HeGain: true},
	"Celu":            {Family: Smooth, HeGain: true},
	"Selu":            {Family: Smooth},
	"HardSwish":       {Family: Smooth, HeGain: true, Fusable: true},
	"Tanh":            {Family: Bounded, Fusable: true},
	"Sigmoid":         {Family: Bounded, Fusable: true},
	"HardSigmoid":     {Family: Bounded, Fusable: true},
	"Softsign":        {Family: Bounded},
	"Softplus":        {Family: Bounded},
	"Clip":            {Family: Clip, HeGain: true, Fusable: true},
}

func init() {
	for name, o := range ops {
		o.Name = name
		ops[name] = o
	}
}

// Lookup returns the activation operator called op (an ONNX op type).
func Lookup(op string) (Op, bool) {
	o, ok := ops[op]
	return o, ok
}

// Is reports whether op is an activation operator.
func Is(op string) bool {
	_, ok := ops[op]
	return ok
}

// HeGain reports whether the weights before op are judged against He's √2.
func HeGain(op string) bool { return ops[op].HeGain }

// Fusable reports whether the executor may fuse op into its producer.
func Fusable(op string) bool { return ops[op].Fusable }

// Names lists the activation operators, sorted.
func Names() []string {
	n := make([]string, 0, len(ops))
	for k := range ops {
		n = append(n, k)
	}
	sort.Strings(n)
	return n
}
