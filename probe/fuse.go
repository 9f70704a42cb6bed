package probe

import (
	"math"

	"github.com/vitals-health/vitals/internal/actkind"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Fusion of an activation into the node that produces its input.
//
// When a producer step (fuseProducers: its kernel knows how) has an output 0
// whose only reader is an activation step listed in fusableActs, Compile
// links the two. At run time the producer's kernel gets Call.fuse and may
// compute the activation's output as well, while its own output is still in
// cache, into a tensor of its own; the plan then hands that tensor to the
// activation step instead of running its kernel. Nothing observable changes:
// the producer's output is still written in full and seen by the hook at its
// step, the activation's hook call happens at its own step with a value
// computed by the same float32 function its kernel would apply, and values
// are released after their last reader as before (the activation's output
// merely exists from the producer's step on).

// fusedAct is an activation a producing kernel computes alongside its own
// output 0. The kernel allocates out (alloc) and fills it with f32 applied to
// output 0, always passing dst as a subslice of out's data and src as the
// subslice of output 0 at the same offset; a kernel that cannot leaves out
// nil and the activation step runs as usual.
//
// SiLU/Swish, exported as s = Sigmoid(x), y = Mul(x, s) with x read by both,
// is one more output: f32 then also writes mul = x·s (the float32 product
// the Mul kernel computes, element for element), and the plan hands mul to
// the Mul step as it hands out to the Sigmoid step.
type fusedAct struct {
	f32  func(dst, src []float32)
	out  *tensor.Tensor
	silu bool
	mul  *tensor.Tensor
	// sigFirst: the Mul reads the sigmoid first (Mul(s, x)); the operands keep
	// their order so that even a NaN's payload is the Mul kernel's
	sigFirst bool
	// noSig: the sigmoid is read by the Mul alone and unobserved
	// (Plan.RunRecycled): out is not written where the kernel can avoid
	// it, and the run hands its buffer back and the hook nil
	noSig bool
}

// alloc creates the fused outputs for a producer output of the given shape
// (uninitialised: the kernel writes every element).
func (f *fusedAct) alloc(ar *tensor.Arena, shape []int) {
	f.out = ar.NewUninit(tensor.Float32, shape)
	if f.silu {
		f.mul = ar.NewUninit(tensor.Float32, shape)
	}
}

// siluF32 is the f32 of a fused SiLU: dst = sigmoid(src), and the same span
// of mul = src·dst. dst is out.F32()[o : o+len(dst)], so o = cap(out) − cap(dst).
func (f *fusedAct) siluF32(dst, src []float32) {
	o := cap(f.out.F32()) - cap(dst)
	keep := dst
	if f.noSig {
		keep = nil
	}
	if siluVec(keep, f.mul.F32()[o:o+len(dst)], src, f.sigFirst) {
		return
	}
	sigmoidF32(dst, src)
	if f.sigFirst {
		vvF32(mulT, f.mul.F32()[o:o+len(dst)], dst, src)
	} else {
		vvF32(mulT, f.mul.F32()[o:o+len(dst)], src, dst)
	}
}

// fuseProducers lists the operators whose kernels honour Call.fuse.
var fuseProducers = map[string]bool{"Conv": true, "BatchNormalization": true}

// fusableActs maps an activation operator (one marked Fusable in the one
// list of activation operators, internal/actkind) to the float32 function its own
// kernel applies elementwise (the very same function, so fused values are
// bit-identical), given the activation node's call with its inputs resolved.
// It reports false when the node's attributes or extra inputs are such that
// the ordinary kernel must run (it then also reports any error).
var fusableActs = map[string]func(c *Call) (func(dst, src []float32), bool){
	"Relu": func(*Call) (func(dst, src []float32), bool) { return reluF32, true },
	"Clip": fuseClip,
	"LeakyRelu": func(c *Call) (func(dst, src []float32), bool) {
		a := c.Float("alpha", 0.01)
		return func(dst, src []float32) { leakyReluF32(dst, src, a) }, true
	},
	"Sigmoid":   func(*Call) (func(dst, src []float32), bool) { return sigmoidF32, true },
	"Tanh":      func(*Call) (func(dst, src []float32), bool) { return tanhF32, true },
	"HardSwish": func(*Call) (func(dst, src []float32), bool) { return hardSwishF32, true },
	"HardSigmoid": func(c *Call) (func(dst, src []float32), bool) {
		a, b := float64(c.Float("alpha", 0.2)), float64(c.Float("beta", 0.5))
		return actF32(actHardSigmoid, [3]float64{a, b}, hardSigmoid(a, b)), true
	},
}

// fuseClip: the bounds of elemClip's float32 path, when they are float32
// scalars and not NaN.
func fuseClip(c *Call) (func(dst, src []float32), bool) {
	l, h := float32(math.Inf(-1)), float32(math.Inf(1))
	if c.Opset < 11 {
		if c.Has("min") {
			l = c.Float("min", 0)
		}
		if c.Has("max") {
			h = c.Float("max", 0)
		}
	} else {
		for i, dst := range []*float32{&l, &h} {
			b := c.Input(1 + i)
			if b == nil {
				continue
			}
			d, ok := b.Data.([]float32)
			if !ok || len(d) != 1 {
				return nil, false
			}
			*dst = d[0]
		}
	}
	if l != l || h != h {
		return nil, false
	}
	return func(dst, src []float32) { clipF32(dst, src, l, h) }, true
}

// markFusions links each fusable producer step to the activation step that
// alone reads its output 0 (Step.fuseWith, −1 when none). The activation's
// other inputs must be known when the producer runs: initializers, graph or
// outer-scope inputs, outputs of earlier steps, or outputs of Constant
// steps (exporters put Clip's bounds as Constant nodes between the Conv and
// the Clip), which fuseFor evaluates ahead of their step.
func (p *Plan) markFusions() {
	producedAt := p.producedAt
	readers := map[string][]int{} // value -> reading steps, once per read
	for i, s := range p.Steps {
		for _, in := range s.Node.Inputs {
			if in != "" {
				readers[in] = append(readers[in], i)
			}
		}
		for _, g := range subgraphs(s.Node) {
			for _, name := range freeNames(g) {
				readers[name] = append(readers[name], -1) // a subgraph read: never fused
			}
		}
	}
	for i := range p.Steps {
		p.Steps[i].fuseWith, p.Steps[i].fuseMul, p.Steps[i].sigLocal = -1, -1, false
	}
	outputs := map[string]bool{}
	for _, o := range p.Graph.Outputs {
		outputs[o.Name] = true
	}
	for i := range p.Steps {
		s := &p.Steps[i]
		if !fuseProducers[s.Node.OpType] || normDomain(s.Node.Domain) != "" || len(s.Node.Outputs) == 0 {
			continue
		}
		v := s.Node.Outputs[0]
		if v == "" || producedAt[v] != i {
			continue
		}
		if j, k, ok := p.siluAfter(v, i, readers); ok {
			s.fuseWith, s.fuseMul = j, k
			sig := p.Steps[j].Node.Outputs[0]
			s.sigLocal = len(readers[sig]) == 1 && readers[sig][0] == k && !outputs[sig]
			continue
		}
		if len(readers[v]) != 1 || readers[v][0] <= i {
			continue
		}
		j := readers[v][0]
		act := p.Steps[j].Node
		if _, ok := fusableActs[act.OpType]; !ok || !actkind.Fusable(act.OpType) || normDomain(act.Domain) != "" ||
			len(act.Inputs) == 0 || act.Inputs[0] != v || len(act.Outputs) != 1 || act.Outputs[0] == "" {
			continue
		}
		early := true
		for _, in := range act.Inputs[1:] {
			if at, ok := producedAt[in]; in != "" && ok && at >= i && !p.isConstantStep(at) {
				early = false
			}
		}
		if early {
			s.fuseWith = j
		}
	}
	p.markChains(readers)
	p.markBiasAdds(readers, outputs)
}

// siluAfter finds a SiLU reading value v of step i: v's only readers are a
// Sigmoid step j (its input 0) and, after it, a Mul step k of v and j's
// output (either order), both in the default domain with one output, and k
// is not in a subgraph. Then step i may compute both (fusedAct).
func (p *Plan) siluAfter(v string, i int, readers map[string][]int) (j, k int, ok bool) {
	r := readers[v]
	if len(r) != 2 || r[0] <= i || r[1] <= r[0] {
		return 0, 0, false
	}
	j, k = r[0], r[1]
	sig, mul := p.Steps[j].Node, p.Steps[k].Node
	if sig.OpType != "Sigmoid" || normDomain(sig.Domain) != "" || len(sig.Inputs) != 1 || sig.Inputs[0] != v ||
		len(sig.Outputs) != 1 || sig.Outputs[0] == "" {
		return 0, 0, false
	}
	s := sig.Outputs[0]
	if mul.OpType != "Mul" || normDomain(mul.Domain) != "" || len(mul.Inputs) != 2 || len(mul.Outputs) != 1 || mul.Outputs[0] == "" ||
		!(mul.Inputs[0] == v && mul.Inputs[1] == s || mul.Inputs[0] == s && mul.Inputs[1] == v) {
		return 0, 0, false
	}
	return j, k, true
}

// fuseFor prepares the fusion of step i's activation (nil when there is
// none or its kernel must run): its call with inputs resolved from env.
func (p *Plan) fuseFor(i int, env *Scope, parent *Call) *fusedAct {
	j := p.Steps[i].fuseWith
	if j < 0 {
		return nil
	}
	if p.Steps[i].fuseMul >= 0 {
		f := &fusedAct{silu: true, sigFirst: p.Steps[p.Steps[i].fuseMul].Node.Inputs[0] != p.Steps[i].Node.Outputs[0],
			noSig: p.Steps[i].sigLocal && parent.run.unobserved[p.Steps[j].Node.Outputs[0]]}
		f.f32 = f.siluF32
		return f
	}
	s := &p.Steps[j]
	c := &Call{Node: s.Node, Opset: s.Opset, Scope: env, sub: parent.sub, run: parent.run}
	c.In = make([]*tensor.Tensor, len(s.Node.Inputs))
	for k, name := range s.Node.Inputs[1:] {
		if name == "" {
			continue
		}
		t, ok := env.Get(name)
		if !ok {
			if t, ok = p.evalConstant(name, env, parent); !ok {
				return nil
			}
		}
		c.In[k+1] = t
	}
	f, ok := fusableActs[s.Node.OpType](c)
	if !ok {
		return nil
	}
	return &fusedAct{f32: f}
}

// fusedNode names the activation a step is fused with (tests).
func (p *Plan) fusedNode(i int) *loader.Node {
	if j := p.Steps[i].fuseWith; j >= 0 {
		return p.Steps[j].Node
	}
	return nil
}

// isConstantStep: step k is a Constant node, whose output depends on its
// attributes only.
func (p *Plan) isConstantStep(k int) bool {
	n := p.Steps[k].Node
	return n.OpType == "Constant" && normDomain(n.Domain) == "" && len(n.Inputs) == 0 && len(n.Outputs) == 1
}

// evalConstant computes the output of the Constant step producing name
// ahead of that step (which still runs, and is observed, in its turn).
func (p *Plan) evalConstant(name string, env *Scope, parent *Call) (*tensor.Tensor, bool) {
	k, ok := p.producedAt[name]
	if !ok || !p.isConstantStep(k) {
		return nil, false
	}
	s := &p.Steps[k]
	c := &Call{Node: s.Node, Opset: s.Opset, Scope: env, sub: parent.sub, run: parent.run, Out: make([]*tensor.Tensor, 1)}
	if err := p.call(s, c); err != nil || c.Out[0] == nil {
		return nil, false
	}
	return c.Out[0], true
}
