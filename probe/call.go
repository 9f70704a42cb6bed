package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Call is one invocation of a kernel: the node, its inputs (nil where an
// optional input is omitted), the outputs the kernel fills, and the opset.
type Call struct {
	Node  *loader.Node
	In    []*tensor.Tensor
	Out   []*tensor.Tensor
	Opset int
	// Scope resolves outer-scope values for subgraph operators (If, Loop, Scan).
	Scope *Scope
	// Plan is the plan being run (for compiled subgraphs).
	sub map[*loader.Graph]*Plan
	run *runState
	// fuse, when not nil, is the activation node that alone consumes output
	// 0: a kernel that can may compute it too and store it in fuse.out (see fuse.go).
	fuse *fusedAct
	// observed are tensors the kernel computed internally for the hook
	// (Observe): the hook gets them after the node's outputs.
	observed []*tensor.Tensor
	// resizeTables, when set, asks Resize and Upsample for their tap tables
	// instead of their output (ResizeTables)
	resizeTables *[]*ResizeTable
	// constIn marks inputs a caller outside a plan keeps unchanged for the
	// tensor's life (ConstInput), like an initializer
	constIn uint64
}

// ConstInput tells the kernel that input i (i < 64) stays unchanged for
// as long as its tensor lives, as an initializer does, so that packings of
// it may be cached and the paths that need such weights taken: for calls
// built outside a plan (the backward pass's convolutions, whose reordered
// weights are kept from batch to batch).
func (c *Call) ConstInput(i int) {
	if i < 64 {
		c.constIn |= 1 << i
	}
}

// Observing reports whether the run has a hook, so that a kernel may hand it
// an internal tensor with Observe (fused attention: the probabilities).
func (c *Call) Observing() bool { return c.run != nil && c.run.hook != nil }

// Observe passes an internal tensor to the hook: it follows the node's
// outputs in the hook's outs (outs[len(Node.Outputs):]), is never stored
// in the run and must not be changed after the call.
func (c *Call) Observe(t *tensor.Tensor) { c.observed = append(c.observed, t) }

// Arena is the memory of the run this call belongs to: kernels allocate
// their outputs and buffers from it (nil: the process default budget, no pool).
func (c *Call) Arena() *tensor.Arena {
	if c.run == nil {
		return nil
	}
	return c.run.arena
}

// UseArena makes a call built outside a plan's run (no hook, no plan:
// the backward pass's own convolutions) allocate its outputs from a, so
// that the caller can hand them back to a's pool.
func (c *Call) UseArena(a *tensor.Arena) { c.run = &runState{arena: a} }

// NIn is the number of inputs present (trailing omitted inputs are not counted).
func (c *Call) NIn() int {
	n := len(c.In)
	for n > 0 && c.In[n-1] == nil {
		n--
	}
	return n
}

// Input returns input i or nil when absent.
func (c *Call) Input(i int) *tensor.Tensor {
	if i < len(c.In) {
		return c.In[i]
	}
	return nil
}

// NOut is the number of outputs the node declares.
func (c *Call) NOut() int { return len(c.Out) }

// WantOut reports whether output i is requested (declared and non-empty name).
func (c *Call) WantOut(i int) bool { return i < len(c.Node.Outputs) && c.Node.Outputs[i] != "" }

// Set stores output i if the node declares it.
func (c *Call) Set(i int, t *tensor.Tensor) {
	if i < len(c.Out) {
		c.Out[i] = t
	}
}

// Attr returns the attribute or nil.
func (c *Call) Attr(name string) *loader.Attr { return c.Node.Attrs[name] }

// Int returns an int attribute or def.
func (c *Call) Int(name string, def int64) int64 {
	if a := c.Node.Attrs[name]; a != nil {
		return a.I
	}
	return def
}

// Float returns a float attribute or def.
func (c *Call) Float(name string, def float32) float32 {
	if a := c.Node.Attrs[name]; a != nil {
		return a.F
	}
	return def
}

// Str returns a string attribute or def.
func (c *Call) Str(name, def string) string {
	if a := c.Node.Attrs[name]; a != nil {
		return a.S
	}
	return def
}

// Ints returns an ints attribute as []int, or nil.
func (c *Call) Ints(name string) []int {
	a := c.Node.Attrs[name]
	if a == nil {
		return nil
	}
	out := make([]int, len(a.Ints))
	for i, v := range a.Ints {
		out[i] = int(v)
	}
	return out
}

// Floats returns a floats attribute or nil.
func (c *Call) Floats(name string) []float32 {
	if a := c.Node.Attrs[name]; a != nil {
		return a.Floats
	}
	return nil
}

// Has reports whether an attribute is present.
func (c *Call) Has(name string) bool { return c.Node.Attrs[name] != nil }

// Errorf builds an error (the run loop adds the node's name and op).
func (c *Call) Errorf(format string, args ...any) error { return fmt.Errorf(format, args...) }

// Need checks that at least n inputs are present.
func (c *Call) Need(n int) error {
	for i := 0; i < n; i++ {
		if c.Input(i) == nil {
			return fmt.Errorf("input %d is missing", i)
		}
	}
	return nil
}
