package grad

import (
	"fmt"
	"sort"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// Op is one node seen backwards: the forward call (node, inputs, outputs,
// attribute helpers of probe.Call), the gradient of L with respect to each
// output (nil: zero) and the gradients the VJP produces for the inputs.
type Op struct {
	*probe.Call
	// GOut[j] is dL/d(output j), nil when no gradient reaches it.
	GOut [][]float64
	// GIn[i] is dL/d(input i), allocated by Grad; nil for inputs that take
	// no gradient (absent, not float, or not depending on a parameter).
	GIn [][]float64
	// GOut32 and GIn32 are GOut and GIn held in float32 (grad32.go): each
	// output's gradient comes in one of GOut[j], GOut32[j] (G and G32 make
	// the other from it), each input's goes to one of GIn[i], GIn32[i].
	GOut32 [][]float32
	GIn32  [][]float32
	// f32 lets a rule of rules32 give float32 inputs float32 gradients
	// (set by the tape; a rule called without it gives float64 ones)
	f32 bool
	// alloc32 and allocRaw32 are alloc and allocRaw for float32 buffers;
	// widened counts the float32 gradients a rule read as float64
	alloc32, allocRaw32 func(n int) []float32
	widened             *int
	// acc32, when set, is input 0's float32 gradient from other readers,
	// pending: a rule may add its own into it and make it GIn32[0]
	acc32 []float32
	// need[i] reports whether input i wants a gradient.
	need []bool
	xs   map[int][]float64
	ys   map[int][]float64
	// gaveOut: GOut[0] is some GIn's buffer already (InPlace)
	gaveOut bool
	// alloc, when set, returns a zeroed buffer (the tape's recycled ones);
	// allocRaw one with undefined contents.
	alloc, allocRaw func(n int) []float64
	// memo, when set, is the tape's store of per-node derived data (Memo).
	memo map[*loader.Node]any
	// arena, when set, is the tape's memory for float32 tensors a rule
	// makes by running a forward kernel (pooled from node to node)
	arena *tensor.Arena
	// wantSq asks a rule of sqRules for Σ G² of output 0 (gsq, gsqOK),
	// taken while it reads G anyway.
	wantSq bool
	gsq    float64
	gsqOK  bool
	// inSq: Σ g² of dL/d(input 0) as written (reportInSq)
	inSq   float64
	inSqOK bool
	// mask, when set, is the float32 input of a ReLU above this
	// BatchNormalization whose rule the tape left to it: G is taken as 0
	// where mask ≤ 0 (or NaN), and Σ G² before the mask goes to rawSq.
	mask    []float32
	rawSq   float64
	rawSqOK bool
}

// sqRules are the operators whose rule, asked by Op.wantSq, reports Σ G²
// of output 0 (reportSq) whenever it writes over G; when it does not
// report, it leaves G unchanged.
var sqRules = map[string]bool{"Relu": true, "BatchNormalization": true, "Conv": true}

// reportSq records Σ G² of output 0 for the tape's grad_rms.
func (o *Op) reportSq(s float64) { o.gsq, o.gsqOK = s, true }

// reportInSq records Σ g² of the gradient the rule wrote for input 0, taken
// as it wrote it: when that value has no other reader, the tape reports it
// for the value instead of summing its gradient again.
func (o *Op) reportInSq(s float64) { o.inSq, o.inSqOK = s, true }

// memoize returns what build derives for this node, computed once per tape
// while valid(v) holds for the stored value (without a tape: every call).
func memoize[T any](o *Op, valid func(T) bool, build func() (T, error)) (T, error) {
	if o.memo != nil {
		if v, ok := o.memo[o.Node].(T); ok && valid(v) {
			return v, nil
		}
	}
	v, err := build()
	if err == nil && o.memo != nil {
		o.memo[o.Node] = v
	}
	return v, err
}

// NoRule is the error of a VJP for an operator variant it has no rule for
// (LSTM with clip): Backward lists the node as missing, "Op (detail)".
func NoRule(detail string) error { return &noRuleError{detail} }

type noRuleError struct{ detail string }

func (e *noRuleError) Error() string { return "no gradient rule for " + e.detail }

// VJP computes the gradients of one operator: it reads o.GOut and the
// forward values and fills the buffers o.Grad(i) returns.
type VJP func(o *Op) error

var vjps = map[string]VJP{}

// register adds the VJP of a default-domain operator (every opset).
func register(op string, f VJP) {
	if _, dup := vjps[op]; dup {
		panic("grad: VJP registered twice for " + op)
	}
	vjps[op] = f
}

// Lookup returns the VJP of an operator of the default domain.
func Lookup(domain, op string) (VJP, bool) {
	if domain != "" && domain != "ai.onnx" {
		return nil, false
	}
	f, ok := vjps[op]
	return f, ok
}

// Ops lists the operator types that have a VJP, sorted.
func Ops() []string {
	out := make([]string, 0, len(vjps))
	for k := range vjps {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

// NewOp prepares a node for its VJP: forward inputs and outputs, the output
// gradients, and which inputs want a gradient (nil need: every float input).
func NewOp(c *probe.Call, gOut [][]float64, need []bool) *Op {
	o := &Op{Call: c, GOut: gOut, GIn: make([][]float64, len(c.In)), GIn32: make([][]float32, len(c.In)), need: need}
	if o.need == nil {
		o.need = make([]bool, len(c.In))
		for i, t := range c.In {
			o.need[i] = t != nil && isFloat(t)
		}
	}
	return o
}

func isFloat(t *tensor.Tensor) bool { return t.DType == tensor.Float32 || t.DType == tensor.Float64 }

// Needs reports whether input i wants a gradient.
func (o *Op) Needs(i int) bool { return i < len(o.need) && o.need[i] && o.Input(i) != nil }

// Grad returns the zeroed buffer for dL/d(input i) (allocated on first use),
// or nil when input i takes no gradient.
func (o *Op) Grad(i int) []float64 {
	if !o.Needs(i) {
		return nil
	}
	if o.GIn[i] == nil {
		if o.alloc != nil {
			o.GIn[i] = o.alloc(o.In[i].Size())
		} else {
			o.GIn[i] = make([]float64, o.In[i].Size())
		}
	}
	return o.GIn[i]
}

// GradFull is Grad for a VJP that writes every element of the buffer: its
// contents on return are undefined (a recycled buffer is not cleared).
func (o *Op) GradFull(i int) []float64 {
	if !o.Needs(i) {
		return nil
	}
	if o.GIn[i] == nil {
		if o.allocRaw != nil {
			o.GIn[i] = o.allocRaw(o.In[i].Size())
		} else {
			o.GIn[i] = make([]float64, o.In[i].Size())
		}
	}
	return o.GIn[i]
}

// InPlace is GradFull for a VJP that computes dL/d(input i) element by
// element from dL/d(output 0) of the same size: it hands out output 0's
// gradient buffer itself (the VJP owns GOut, which the pass does not read
// again), so the VJP overwrites G in place, reading each element before
// writing it. Otherwise it is GradFull.
func (o *Op) InPlace(i int) []float64 {
	if !o.Needs(i) {
		return nil
	}
	if o.GIn[i] == nil && len(o.GOut) > 0 && o.GOut[0] != nil && len(o.GOut[0]) == o.In[i].Size() && !o.gaveOut {
		o.GIn[i] = o.GOut[0]
		o.gaveOut = true
		return o.GIn[i]
	}
	return o.GradFull(i)
}

// X is forward input i as float64 (shared with the tensor when it is float64).
func (o *Op) X(i int) []float64 {
	if v, ok := o.xs[i]; ok {
		return v
	}
	if o.xs == nil {
		o.xs = map[int][]float64{}
	}
	v := F64(o.Input(i))
	o.xs[i] = v
	return v
}

// Y is forward output j as float64.
func (o *Op) Y(j int) []float64 {
	if v, ok := o.ys[j]; ok {
		return v
	}
	if o.ys == nil {
		o.ys = map[int][]float64{}
	}
	v := F64(o.Out[j])
	o.ys[j] = v
	return v
}

// G is dL/d(output j); a zero slice of the output's size when no gradient
// reached it. A float32 gradient is widened (once: it becomes GOut[j]).
func (o *Op) G(j int) []float64 {
	if j < len(o.GOut) && o.GOut[j] != nil {
		return o.GOut[j]
	}
	if j < len(o.GOut32) && o.GOut32[j] != nil {
		// GOut32[j] stays: the tape recycles both
		g := o.raw64(len(o.GOut32[j]))
		widen(g, o.GOut32[j])
		o.GOut[j] = g
		if o.widened != nil {
			*o.widened++
		}
		return g
	}
	return make([]float64, o.Out[j].Size())
}

// F64 returns a float tensor's elements as float64 (nil for other types).
func F64(t *tensor.Tensor) []float64 {
	if t == nil {
		return nil
	}
	switch d := t.Data.(type) {
	case []float64:
		return d
	case []float32:
		out := make([]float64, len(d))
		for i, v := range d {
			out[i] = float64(v)
		}
		return out
	}
	return nil
}

// Ints returns an integer tensor's elements (shape inputs such as Reshape's).
func Ints(t *tensor.Tensor) ([]int, error) {
	if t == nil {
		return nil, nil
	}
	switch d := t.Data.(type) {
	case []int64:
		out := make([]int, len(d))
		for i, v := range d {
			out[i] = int(v)
		}
		return out, nil
	case []int32:
		out := make([]int, len(d))
		for i, v := range d {
			out[i] = int(v)
		}
		return out, nil
	}
	return nil, fmt.Errorf("expected an integer tensor, got %v", t.DType)
}

// bcastMap maps every flat index of outShape to the flat index of the
// element of a tensor of shape in that numpy broadcasting reads there.
func bcastMap(in, outShape []int) []int {
	n := 1
	for _, d := range outShape {
		n *= d
	}
	m := make([]int, n)
	strides := probe.BroadcastStrides(in, outShape)
	r := len(outShape)
	idx := make([]int, r)
	off := 0
	for k := 0; k < n; k++ {
		m[k] = off
		for a := r - 1; a >= 0; a-- {
			idx[a]++
			off += strides[a]
			if idx[a] < outShape[a] {
				break
			}
			off -= strides[a] * outShape[a]
			idx[a] = 0
		}
	}
	return m
}

// sameShape reports equal shapes.
func sameShape(a, b []int) bool { return tensor.SameShape(a, b) }
