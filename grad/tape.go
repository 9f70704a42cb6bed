package grad

import (
	"errors"
	"fmt"
	"sort"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// Tape holds every value of one batch of a plan's main graph: the graph
// inputs, the initializers and each node's outputs, recorded by Record from
// the run's hook. The values must stay unchanged until Backward returns (a
// run without buffer recycling, or one whose recycling waits for it).
type Tape struct {
	// InputGrads asks Backward for dL/dx of the graph inputs too (off: the
	// first layers skip that product).
	InputGrads bool
	plan       *probe.Plan
	vals       map[string]*tensor.Tensor
	// step[n] is the main-graph step of node n (subgraph nodes are not recorded).
	step map[*loader.Node]int
	// memo keeps what a VJP derives from a node's attributes and shapes
	// (convolution geometry, reordered weights) from batch to batch.
	memo map[*loader.Node]any
	// free keeps the gradient buffers of one backward pass for the next,
	// free32 the float32 ones
	free   *freeList
	free32 *pool[float32]
	// only64 keeps every gradient in float64 (tests: the reference of the
	// float32 path)
	only64 bool
	// Widened counts, in the last backward pass, the float32 gradients
	// widened to float64 for a rule without a float32 path (rules32)
	Widened int
	// arena pools the float32 outputs of the forward kernels the rules
	// run (dX's convolutions), within a pass and from one pass to the next
	arena *tensor.Arena
	// uses counts the readers of each value (node inputs, graph outputs)
	uses map[string]int
	// made is the operator type that produces each node output
	made map[string]string
}

// NewTape prepares a tape for batches of plan p.
func NewTape(p *probe.Plan) *Tape {
	t := &Tape{plan: p, step: map[*loader.Node]int{}, memo: map[*loader.Node]any{}, free: &freeList{byLen: map[int][][]float64{}}, free32: &pool[float32]{byLen: map[int][][]float32{}}}
	t.arena = &tensor.Arena{Budget: tensor.MemoryBudget(), Pool: tensor.NewPool(arenaPool)}
	t.uses, t.made = map[string]int{}, map[string]string{}
	for i, s := range p.Steps {
		t.step[s.Node] = i
		for _, in := range s.Node.Inputs {
			t.uses[in]++
		}
		if s.Node.Domain == "" || s.Node.Domain == "ai.onnx" {
			for _, o := range s.Node.Outputs {
				t.made[o] = s.Node.OpType
			}
		}
	}
	for _, o := range p.Graph.Outputs {
		t.uses[o.Name]++
	}
	t.Reset(nil)
	return t
}

// Reset starts a new batch with these graph inputs.
func (t *Tape) Reset(inputs map[string]*tensor.Tensor) {
	t.vals = make(map[string]*tensor.Tensor, len(t.plan.Graph.Initializers)+len(t.plan.Steps)+len(inputs))
	for name, v := range t.plan.Graph.Initializers {
		t.vals[name] = v
	}
	for name, v := range inputs {
		t.vals[name] = v
	}
}

// Record stores a node's outputs; it has the signature of a probe.Hook's
// body and ignores nodes of subgraphs.
func (t *Tape) Record(n *loader.Node, outs []*tensor.Tensor) {
	if _, ok := t.step[n]; !ok {
		return
	}
	for j, name := range n.Outputs {
		if name != "" && j < len(outs) && outs[j] != nil {
			t.vals[name] = outs[j]
		}
	}
}

// Bytes estimates the memory a backward pass over the recorded batch needs
// beyond the batch itself: a float64 gradient for every float value (an
// upper bound; gradients are freed as the pass goes down).
func (t *Tape) Bytes() int64 {
	var n int64
	for name, v := range t.vals {
		if _, init := t.plan.Graph.Initializers[name]; !init && isFloat(v) {
			n += int64(v.Size()) * 8
		}
	}
	return n
}

// Value returns a recorded value.
func (t *Tape) Value(name string) *tensor.Tensor { return t.vals[name] }

// Result is what one backward pass produced.
type Result struct {
	// Params are dL/dW for every float initializer (and float Constant node
	// tensor, by output name) a gradient reached.
	Params map[string][]float64
	// Inputs are dL/dx for the float graph inputs (with Tape.InputGrads).
	Inputs map[string][]float64
	// Missing lists, by operator type, the nodes a gradient reached that
	// have no VJP: nothing flows past them.
	Missing map[string][]string
}

// MissingLines is one line per operator type without a VJP, naming its nodes.
func (r *Result) MissingLines() []string {
	var out []string
	for op, nodes := range r.Missing {
		q := make([]string, len(nodes))
		for i, n := range nodes {
			q[i] = fmt.Sprintf("%q", n)
		}
		if len(q) > 5 {
			q = append(q[:5], fmt.Sprintf("and %d more", len(nodes)-5))
		}
		out = append(out, fmt.Sprintf("%s (no gradient rule): %d node(s): %v", op, len(nodes), q))
	}
	sort.Strings(out)
	return out
}

// Backward propagates seed (dL/dv for some values, graph outputs usually)
// through the recorded batch in reverse step order. value, when not nil, is
// called once with the final gradient of every node output a gradient
// reached (before the step that produced it runs its VJP), with that step's
// index; the slice is only valid during the call.
func (t *Tape) Backward(seed map[string][]float64, value func(step int, name string, g []float64)) (*Result, error) {
	return t.backward(seed, value, nil)
}

// BackwardSq is Backward with, instead of each final gradient g, its size
// and Σ g² (what grad_rms needs): the rules of sqRules take the sum while
// they read g for their own product, saving a pass over the buffer; for
// the others it is taken before the rule runs. sq is called once per node
// output a gradient reached, with the index of the step that produced it.
func (t *Tape) BackwardSq(seed map[string][]float64, sq func(step int, name string, n int, sumSq float64)) (*Result, error) {
	return t.backward(seed, nil, sq)
}

func (t *Tape) backward(seed map[string][]float64, value func(step int, name string, g []float64), sq func(step int, name string, n int, sumSq float64)) (*Result, error) {
	p := t.plan
	// a value wants a gradient when it is float and depends on an
	// initializer or a Constant node's float tensor (parameters too), or a
	// graph input with InputGrads; a node with subgraphs (If, Loop, Scan)
	// may read parameters through its bodies, so its outputs want one too
	wants := map[string]bool{}
	for name, v := range t.vals {
		if _, init := p.Graph.Initializers[name]; init && isFloat(v) {
			wants[name] = true
		}
	}
	for _, in := range p.Graph.Inputs {
		if v := t.vals[in.Name]; v != nil && isFloat(v) && t.InputGrads {
			wants[in.Name] = true
		}
	}
	for _, s := range p.Steps {
		dep := isParamNode(s.Node) || hasSubgraph(s.Node)
		for _, in := range s.Node.Inputs {
			dep = dep || (in != "" && wants[in])
		}
		if !dep {
			continue
		}
		for _, o := range s.Node.Outputs {
			if v := t.vals[o]; o != "" && v != nil && isFloat(v) {
				wants[o] = true
			}
		}
	}
	grads := map[string][]float64{}
	// float32 gradients of float32 values (grad32.go); a value is in one
	// of the two maps at most
	grads32 := map[string][]float32{}
	t.Widened = 0
	for name, g := range seed {
		v := t.vals[name]
		if v == nil {
			return nil, fmt.Errorf("gradient seed for %q: no such value in the batch", name)
		}
		if len(g) != v.Size() {
			return nil, fmt.Errorf("gradient seed for %q has %d elements, the value %v has %d", name, len(g), v.Shape, v.Size())
		}
		grads[name] = append([]float64(nil), g...)
	}
	res := &Result{Params: map[string][]float64{}, Inputs: map[string][]float64{}, Missing: map[string][]string{}}
	free, free32 := t.free, t.free32
	// wide is a float32 gradient widened for value or for a rule without a
	// float32 path (counted)
	wide := func(g []float32) []float64 {
		w := free.getRaw(len(g))
		widen(w, g)
		return w
	}
	// masks: ReLU rules left to the BatchNormalization below them, by the
	// BatchNormalization's output (fuseRelu)
	masks := map[string]pendingMask{}
	// known: Σ g² of final gradients a rule took as it wrote them
	// (reportInSq), by value
	known := map[string]float64{}
	for i := len(p.Steps) - 1; i >= 0; i-- {
		s := &p.Steps[i]
		n := s.Node
		if value == nil && sq != nil && t.fuseRelu(n, grads, grads32, wants) {
			out, in := n.Outputs[0], n.Inputs[0]
			if g, ok := grads[out]; ok {
				delete(grads, out)
				grads[in] = g // the mask is applied by the BatchNormalization rule
			} else {
				grads32[in] = grads32[out]
				delete(grads32, out)
			}
			masks[in] = pendingMask{x: t.vals[in].Data.([]float32), step: i, out: out}
			continue
		}
		gOut := make([][]float64, len(n.Outputs))
		gOut32 := make([][]float32, len(n.Outputs))
		any := false
		// the rule gives Σ G² of its single output (sqRules): reported after it
		deferSq := sq != nil && len(n.Outputs) == 1 && sqRules[n.OpType] && (n.Domain == "" || n.Domain == "ai.onnx")
		for j, o := range n.Outputs {
			if o == "" {
				continue
			}
			if s, ok := known[o]; ok && sq != nil {
				delete(known, o)
				if g, ok := grads32[o]; ok {
					sq(i, o, len(g), s)
					gOut32[j] = g
					any = true
					if value != nil {
						w := wide(g)
						value(i, o, w)
						free.put(w)
					}
					delete(grads32, o)
					deferSq = false
					continue
				}
			}
			if g, ok := grads[o]; ok {
				gOut[j] = g
				any = true
				if value != nil {
					value(i, o, g)
				}
				if sq != nil && !deferSq {
					sq(i, o, len(g), sumSq(g))
				}
				delete(grads, o)
			} else if g, ok := grads32[o]; ok {
				gOut32[j] = g
				any = true
				if value != nil {
					w := wide(g)
					value(i, o, w)
					free.put(w)
				}
				if sq != nil && !deferSq {
					sq(i, o, len(g), sumSq32(g))
				}
				delete(grads32, o)
			}
		}
		// a ReLU above left its mask: the BatchNormalization rule applies it
		// while reading G, or else it is applied here (unmask)
		pm, masked := masks[n.Outputs[0]]
		delete(masks, n.Outputs[0])
		unmask := func() {
			if !masked {
				return
			}
			if g := gOut[0]; g != nil {
				raw := splitSum(len(g), func(lo, hi int) float64 { return reluMaskSq(g[lo:hi], g[lo:hi], pm.x[lo:hi]) })
				sq(pm.step, pm.out, len(g), raw)
			} else if g := gOut32[0]; g != nil {
				raw := splitSum(len(g), func(lo, hi int) float64 { return reluMaskSq32(g[lo:hi], g[lo:hi], pm.x[lo:hi]) })
				sq(pm.step, pm.out, len(g), raw)
			}
			masked = false
		}
		if !any {
			continue
		}
		// flushSq reports the deferred sum: the rule's, or taken from G,
		// which a rule that does not report leaves unchanged
		flushSq := func(op *Op) {
			if !deferSq || (gOut[0] == nil && gOut32[0] == nil) {
				return
			}
			switch {
			case op != nil && op.gsqOK:
				sq(i, n.Outputs[0], n0(gOut[0], gOut32[0]), op.gsq)
			case gOut[0] != nil:
				sq(i, n.Outputs[0], len(gOut[0]), sumSq(gOut[0]))
			default:
				sq(i, n.Outputs[0], len(gOut32[0]), sumSq32(gOut32[0]))
			}
		}
		if isParamNode(n) { // a weight given as a Constant node
			for j, o := range n.Outputs {
				if gOut[j] != nil {
					res.Params[o] = gOut[j]
				} else if gOut32[j] != nil {
					res.Params[o] = wide(gOut32[j])
				}
			}
			continue
		}
		if hasSubgraph(n) { // no rule through bodies
			res.Missing[n.OpType] = append(res.Missing[n.OpType], n.Name)
			continue
		}
		need := make([]bool, len(n.Inputs))
		needAny := false
		in := make([]*tensor.Tensor, len(n.Inputs))
		for j, name := range n.Inputs {
			if name == "" {
				continue
			}
			in[j] = t.vals[name]
			if in[j] == nil {
				if v, ok := p.Graph.Initializers[name]; ok {
					in[j] = v
				}
			}
			need[j] = wants[name] && in[j] != nil
			needAny = needAny || need[j]
		}
		if !needAny {
			unmask()
			flushSq(nil)
			continue
		}
		f, ok := Lookup(n.Domain, n.OpType)
		if !ok {
			unmask()
			flushSq(nil)
			res.Missing[n.OpType] = append(res.Missing[n.OpType], n.Name)
			continue
		}
		out := make([]*tensor.Tensor, len(n.Outputs))
		for j, name := range n.Outputs {
			if name != "" {
				out[j] = t.vals[name]
			}
		}
		f32 := !t.only64 && rules32[n.OpType]
		if !f32 { // a rule without a float32 path reads G widened
			for j, g := range gOut32 {
				if g != nil {
					gOut[j], gOut32[j] = wide(g), nil
					free32.put(g)
					t.Widened++
				}
			}
		}
		op := NewOp(&probe.Call{Node: n, In: in, Out: out, Opset: s.Opset}, gOut, need)
		op.GOut32 = gOut32
		op.f32 = f32
		op.alloc, op.allocRaw = free.get, free.getRaw
		op.alloc32, op.allocRaw32 = free32.get, free32.getRaw
		op.widened = &t.Widened
		op.memo = t.memo
		op.arena = t.arena
		op.wantSq = deferSq
		if f32 && n.OpType == "Conv" && len(n.Inputs) > 0 && n.Inputs[0] != "" {
			if g, ok := grads32[n.Inputs[0]]; ok && len(g) == in[0].Size() {
				op.acc32 = g // dX's convolutions add into it (conv32)
			}
		}
		if masked {
			if _, ok := in[0].Data.([]float32); ok && n.OpType == "BatchNormalization" && deferSq {
				op.mask = pm.x
			} else {
				unmask()
			}
		}
		err := callVJP(f, op)
		// ran: the rule ran, or declined this variant with G left unchanged
		if ran := err == nil || errors.As(err, new(*noRuleError)); ran {
			if op.mask != nil {
				if !op.rawSqOK {
					return nil, fmt.Errorf("gradient of node %q (%s): internal error: the ReLU mask was not applied", n.Name, n.OpType)
				}
				sq(pm.step, pm.out, n0(gOut[0], gOut32[0]), op.rawSq)
			}
			flushSq(op)
		}
		if err != nil {
			var nr *noRuleError
			if errors.As(err, &nr) {
				key := n.OpType + " " + nr.detail
				res.Missing[key] = append(res.Missing[key], n.Name)
				continue
			}
			return nil, fmt.Errorf("gradient of node %q (%s): %w", n.Name, n.OpType, err)
		}
		// the outputs' gradients are used up (with the copies G and G32
		// made): their storage serves later steps
		for _, g := range op.GOut {
			if g != nil && !aliases(g, op.GIn) {
				free.put(g)
			}
		}
		for _, g := range op.GOut32 {
			if g != nil && !aliases32(g, op.GIn32) {
				free32.put(g)
			}
		}
		if op.inSqOK && sq != nil && len(n.Inputs) > 0 && t.uses[n.Inputs[0]] == 1 && op.GIn32[0] != nil {
			if _, started := grads32[n.Inputs[0]]; !started {
				known[n.Inputs[0]] = op.inSq
			}
		}
		for j, name := range n.Inputs {
			if name == "" {
				continue
			}
			if g := op.GIn[j]; g != nil {
				t.addGrad(grads, grads32, name, g, nil)
			} else if g := op.GIn32[j]; g != nil {
				t.addGrad(grads, grads32, name, nil, g)
			}
		}
	}
	// buffers a kernel drew from the arena without handing them back are
	// forgotten (the pool keeps only those put back)
	t.arena.Pool.Recycle(nil, nil)
	for name, g := range grads32 {
		grads[name] = wide(g)
		free32.put(g)
	}
	for name, g := range grads {
		if _, init := p.Graph.Initializers[name]; init {
			res.Params[name] = g
		} else {
			res.Inputs[name] = g
		}
	}
	return res, nil
}

// n0 is the length of whichever of g, g32 is set.
func n0(g []float64, g32 []float32) int {
	if g != nil {
		return len(g)
	}
	return len(g32)
}

// addGrad adds one reader's gradient of value name (g or g32) to the
// pending ones: float32 + float32 in float32, a mix in float64.
func (t *Tape) addGrad(grads map[string][]float64, grads32 map[string][]float32, name string, g []float64, g32 []float32) {
	add64 := func(acc []float64, g []float64) {
		split(len(g), func(lo, hi int) {
			a := acc[lo:hi]
			for k, v := range g[lo:hi] {
				a[k] += v
			}
		})
	}
	add32 := func(acc []float64, g []float32) {
		split(len(g), func(lo, hi int) {
			a := acc[lo:hi]
			for k, v := range g[lo:hi] {
				a[k] += float64(v)
			}
		})
	}
	acc, ok := grads[name]
	acc32, ok32 := grads32[name]
	switch {
	case g != nil && ok: // a value read by several nodes
		add64(acc, g)
	case g != nil && ok32:
		add32(g, acc32)
		t.free32.put(acc32)
		delete(grads32, name)
		grads[name] = g
	case g != nil:
		grads[name] = g
	case ok:
		add32(acc, g32)
		t.free32.put(g32)
	case ok32 && len(g32) > 0 && &acc32[0] == &g32[0]: // the rule added into it (Op.acc32)
	case ok32:
		split(len(g32), func(lo, hi int) {
			a := acc32[lo:hi]
			for k, v := range g32[lo:hi] {
				a[k] += v
			}
		})
		t.free32.put(g32)
	default:
		grads32[name] = g32
	}
}

// arenaPool bounds the free float32 buffers the tape's arena keeps
// (bytes; common practice: a fraction of a typical memory budget).
const arenaPool = 256 << 20

// pendingMask is a ReLU's rule left to the BatchNormalization that feeds
// it: the ReLU's float32 input x (the gradient passes where x > 0), and
// the step and output name under which Σ G² of its output is reported.
type pendingMask struct {
	x    []float32
	step int
	out  string
}

// fuseRelu reports a ReLU node whose rule the BatchNormalization rule below
// it can do in its own pass over G (one pass over the buffer less): a
// float32 ReLU whose input is a float32 BatchNormalization's output read by
// it alone, with a gradient at its output and none at its input yet.
func (t *Tape) fuseRelu(n *loader.Node, grads map[string][]float64, grads32 map[string][]float32, wants map[string]bool) bool {
	if n.OpType != "Relu" || (n.Domain != "" && n.Domain != "ai.onnx") || len(n.Inputs) != 1 || len(n.Outputs) != 1 {
		return false
	}
	in, out := n.Inputs[0], n.Outputs[0]
	g, ok := grads[out]
	g32, ok32 := grads32[out]
	if !(ok || ok32) || !wants[in] || t.uses[in] != 1 || t.made[in] != "BatchNormalization" {
		return false
	}
	if _, started := grads[in]; started {
		return false
	}
	if _, started := grads32[in]; started {
		return false
	}
	x, ok := t.vals[in].Data.([]float32)
	return ok && len(x) == n0(g, g32)
}

// freeList recycles gradient buffers within a backward pass and from one
// pass to the next, by capacity: a request takes a free buffer of its
// exact size, or else the smallest one up to fitSlack times larger (a
// fresh buffer costs the runtime's zeroing and the first touch of its
// pages, about 5% of the backward pass of resnet_tiny).
type freeList = pool[float64]

// pool is the free list of one element type (freeList: float64; the
// tape's free32: float32 gradients).
type pool[T float32 | float64] struct{ byLen map[int][][]T }

// fitSlack bounds the memory a recycled buffer wastes (common practice:
// a small power of two).
const fitSlack = 4

// take removes and returns a free buffer for n elements (nil: none fits).
func (f *pool[T]) take(n int) []T {
	c := n
	if len(f.byLen[n]) == 0 {
		c = 0
		for k, l := range f.byLen {
			if len(l) > 0 && k > n && k <= fitSlack*n && (c == 0 || k < c) {
				c = k
			}
		}
		if c == 0 {
			return nil
		}
	}
	l := f.byLen[c]
	b := l[len(l)-1]
	f.byLen[c] = l[:len(l)-1]
	return b[:n]
}

func (f *pool[T]) get(n int) []T {
	if b := f.take(n); b != nil {
		clear(b)
		return b
	}
	return make([]T, n)
}

// getRaw is get without clearing a recycled buffer.
func (f *pool[T]) getRaw(n int) []T {
	if b := f.take(n); b != nil {
		return b
	}
	return make([]T, n)
}

func (f *pool[T]) put(b []T) {
	if cap(b) > 0 {
		f.byLen[cap(b)] = append(f.byLen[cap(b)], b[:cap(b)])
	}
}

// aliases reports whether g is (the start of) one of the buffers in gs.
func aliases(g []float64, gs [][]float64) bool {
	for _, x := range gs {
		if len(x) > 0 && len(g) > 0 && &x[0] == &g[0] {
			return true
		}
	}
	return false
}

// isParamNode reports a Constant node holding a float tensor of rank ≥ 1: a
// weight stored as a node (its gradient is reported like an initializer's).
func isParamNode(n *loader.Node) bool { return ConstantParam(n) != nil }

// ConstantParam is the float tensor of rank ≥ 1 a Constant node holds
// (attribute value or value_floats), nil for any other node.
func ConstantParam(n *loader.Node) *tensor.Tensor {
	if n.OpType != "Constant" || (n.Domain != "" && n.Domain != "ai.onnx") {
		return nil
	}
	if a := n.Attrs["value"]; a != nil && a.T != nil && isFloat(a.T) && a.T.Rank() >= 1 {
		return a.T
	}
	if a := n.Attrs["value_floats"]; a != nil {
		return tensor.From(a.Floats, len(a.Floats))
	}
	return nil
}

// hasSubgraph reports a node with a graph attribute (If, Loop, Scan).
func hasSubgraph(n *loader.Node) bool {
	for _, a := range n.Attrs {
		if a.G != nil || len(a.Graphs) > 0 {
			return true
		}
	}
	return false
}

// callVJP runs a VJP, turning a panic (a shape it did not expect) into an
// error naming the operator, so that the rest of the report survives.
func callVJP(f VJP, o *Op) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("internal error: %v", r)
		}
	}()
	return f(o)
}
