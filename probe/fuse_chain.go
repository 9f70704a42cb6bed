package probe

import (
	"container/heap"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Elementwise chains. Exporters write many activations as a run of
// elementwise nodes: GELU as x·½·(1 + erf(x/√2)) (Div, Erf, Add, Mul, Mul),
// its tanh form with Pow(x, 3) and Tanh, SiLU as x·sigmoid(x). Run one node
// at a time, each step reads and writes a whole tensor, usually beyond the
// caches. A chain is computed instead by its first step, chunk by chunk
// (chainChunk values, in L1), every member's kernel function applied in
// turn to the chunk: the same float32 functions the members' own kernels
// apply element by element, so every value is bit-identical. Each member's
// output is written as before and handed to the hook at the member's own
// step, except the values the caller declared unobserved (Plan.RunRecycled)
// that no step outside the chain reads: those are not written at all, and
// the hook gets nil in their place.
//
// A member is an Add, Sub, Mul or Div (opset 7 on: no legacy broadcast),
// a Pow whose exponent is a constant scalar, or an Erf, Tanh or Sigmoid, in
// the default domain, with one output; its inputs are earlier members'
// values, values that exist when the chain's first step runs (of the same
// shape as the chain's values, checked at run time) and constant scalars
// (initializers or Constant nodes holding one value). Every member after
// the first reads an earlier member's value. A chain has at least chainMin
// members.

// chainChunk is the values a chain computes per member before moving on:
// a few 4 KiB buffers stay in L1 however many members there are.
const chainChunk = 1024

// chainMin is the shortest chain worth fusing (two steps save one pass).
const chainMin = 2

// chainRef is one operand of a member: an earlier member's value (member ≥ 0)
// or a value of the environment (member −1, by name).
type chainRef struct {
	member int
	name   string
}

// chainMember is one step of a chain.
type chainMember struct {
	step int
	op   string // "Add", "Sub", "Mul", "Div", "Pow", "Erf", "Tanh", "Sigmoid"
	in   []chainRef
	// arith is the operation of Add/Sub/Mul/Div, unary the function of Erf,
	// Tanh, Sigmoid (nil otherwise)
	arith opID
	unary func(dst, src []float32)
	// outside: the member's value is read by a step outside the chain, a
	// subgraph, or is a graph output (it is always written then)
	outside bool
}

// elemChain is a chain found by markChains, stored on its first step.
type elemChain struct {
	members []chainMember
}

var chainArith = map[string]opID{"Add": addT, "Sub": subT, "Mul": mulT, "Div": divT}

var chainUnary = map[string]func(dst, src []float32){"Erf": erfF32, "Tanh": tanhF32, "Sigmoid": sigmoidF32}

// chainable reports whether step i's node may be a chain member by its
// operator alone.
func (p *Plan) chainable(i int) bool {
	s := &p.Steps[i]
	n := s.Node
	if normDomain(n.Domain) != "" || len(n.Outputs) != 1 || n.Outputs[0] == "" || len(subgraphs(n)) > 0 {
		return false
	}
	if _, ok := chainArith[n.OpType]; ok {
		// a constant operand must be a scalar: a bias or a per-channel scale
		// broadcasts, which a chain does not
		return s.Opset >= 7 && len(n.Inputs) == 2 && n.Inputs[0] != "" && n.Inputs[1] != "" &&
			(!p.constant(n.Inputs[0]) || p.constScalar(n.Inputs[0])) && (!p.constant(n.Inputs[1]) || p.constScalar(n.Inputs[1]))
	}
	if n.OpType == "Pow" {
		return s.Opset >= 7 && len(n.Inputs) == 2 && p.constScalar(n.Inputs[1])
	}
	if _, ok := chainUnary[n.OpType]; ok {
		return len(n.Inputs) == 1 && n.Inputs[0] != ""
	}
	return false
}

// constSize follows name through Identity nodes (exporters write a shared
// weight as Identity of another) to an initializer or a Constant node and
// returns the number of values it holds (−1 when a Constant's size is not
// read here); ok is false for a value computed from data.
func (p *Plan) constSize(name string) (size int, ok bool) {
	for hop := 0; hop < 16; hop++ {
		if t, ok := p.Graph.Initializers[name]; ok {
			return t.Size(), true
		}
		k, ok := p.producedAt[name]
		if !ok {
			return 0, false
		}
		n := p.Steps[k].Node
		switch {
		case p.isConstantStep(k):
			if a := n.Attrs["value"]; a != nil && a.T != nil {
				return a.T.Size(), true
			}
			if _, f := n.Attrs["value_float"]; f {
				return 1, true
			}
			return -1, true
		case n.OpType == "Identity" && normDomain(n.Domain) == "" && len(n.Inputs) == 1:
			name = n.Inputs[0]
		default:
			return 0, false
		}
	}
	return 0, false
}

// constant reports whether name is a constant (constSize).
func (p *Plan) constant(name string) bool {
	_, ok := p.constSize(name)
	return ok
}

// constScalar reports whether name is a constant holding exactly one value.
func (p *Plan) constScalar(name string) bool {
	n, ok := p.constSize(name)
	return ok && n == 1
}

// markChains finds the chains (after markFusions: a step an activation
// fusion computes or is computed by is no member). readers maps each value
// to the steps reading it (−1 for a subgraph read).
func (p *Plan) markChains(readers map[string][]int) {
	p.chains = map[int]*elemChain{}
	taken := make([]bool, len(p.Steps))
	for i := range p.Steps {
		s := &p.Steps[i]
		if s.fuseWith >= 0 {
			taken[i] = true
			taken[s.fuseWith] = true
		}
		if s.fuseMul >= 0 {
			taken[s.fuseMul] = true
		}
	}
	outputs := map[string]bool{}
	for _, o := range p.Graph.Outputs {
		outputs[o.Name] = true
	}
	for i := range p.Steps {
		if taken[i] || !p.chainable(i) || !p.chainStart(i) {
			continue
		}
		member := map[string]int{p.Steps[i].Node.Outputs[0]: 0}
		ch := &elemChain{members: []chainMember{p.chainMemberOf(i, member)}}
		cand := &intHeap{}
		seen := map[int]bool{}
		push := func(v string) {
			for _, r := range readers[v] {
				if r > i && !seen[r] {
					seen[r] = true
					heap.Push(cand, r)
				}
			}
		}
		push(p.Steps[i].Node.Outputs[0])
		for cand.Len() > 0 {
			j := heap.Pop(cand).(int)
			if taken[j] || !p.chainable(j) || !p.chainReads(j, i, member) {
				continue
			}
			member[p.Steps[j].Node.Outputs[0]] = len(ch.members)
			ch.members = append(ch.members, p.chainMemberOf(j, member))
			push(p.Steps[j].Node.Outputs[0])
		}
		if len(ch.members) < chainMin {
			continue
		}
		for k := range ch.members {
			m := &ch.members[k]
			v := p.Steps[m.step].Node.Outputs[0]
			m.outside = outputs[v]
			for _, r := range readers[v] {
				if r < 0 || !p.isMemberStep(ch, r) {
					m.outside = true
				}
			}
			taken[m.step] = true
		}
		p.chains[i] = ch
		for _, m := range ch.members[1:] {
			p.Steps[m.step].inChain = true
		}
	}
}

func (p *Plan) isMemberStep(ch *elemChain, step int) bool {
	for _, m := range ch.members {
		if m.step == step {
			return true
		}
	}
	return false
}

// chainStart: the first member reads at least one value that is no
// constant scalar (the chain's data).
func (p *Plan) chainStart(i int) bool {
	n := p.Steps[i].Node
	if n.OpType == "Pow" {
		return !p.constScalar(n.Inputs[0])
	}
	for _, in := range n.Inputs {
		if !p.constScalar(in) {
			return true
		}
	}
	return false
}

// chainReads: every input of step j is a member's value, a constant scalar
// or a value that exists before step first runs, and one is a member's.
func (p *Plan) chainReads(j, first int, member map[string]int) bool {
	reads := false
	for _, in := range p.Steps[j].Node.Inputs {
		if _, ok := member[in]; ok {
			reads = true
			continue
		}
		if p.constScalar(in) {
			continue
		}
		if at, ok := p.producedAt[in]; ok && at >= first {
			return false
		}
	}
	return reads
}

func (p *Plan) chainMemberOf(i int, member map[string]int) chainMember {
	n := p.Steps[i].Node
	m := chainMember{step: i, op: n.OpType, arith: chainArith[n.OpType], unary: chainUnary[n.OpType]}
	for _, in := range n.Inputs {
		if k, ok := member[in]; ok {
			m.in = append(m.in, chainRef{member: k})
		} else {
			m.in = append(m.in, chainRef{member: -1, name: in})
		}
	}
	return m
}

// chainFor runs the chain starting at step i, if there is one and its
// operands allow it.
func (p *Plan) chainFor(i int, env *Scope, c *Call) ([]*tensor.Tensor, bool) {
	ch := p.chains[i]
	if ch == nil {
		return nil, false
	}
	return p.runChain(ch, env, c)
}

// chainOperand is a resolved operand: a member's buffer for the current
// chunk (member ≥ 0), a full-size tensor's data, or a scalar.
type chainOperand struct {
	member int
	full   []float32
	scalar float32
	isScal bool
}

// runChain computes chain ch at its first step: every member's output
// (nil for the elided), or ok false when the operands at run time do not
// allow it (then the steps run one by one as usual).
func (p *Plan) runChain(ch *elemChain, env *Scope, c *Call) (outs []*tensor.Tensor, ok bool) {
	ops := make([][]chainOperand, len(ch.members))
	var shape []int
	size, scalarRank := -1, 0
	for k, m := range ch.members {
		ops[k] = make([]chainOperand, len(m.in))
		for q, r := range m.in {
			if r.member >= 0 {
				ops[k][q] = chainOperand{member: r.member}
				continue
			}
			t, found := env.Get(r.name)
			if !found {
				if t, found = p.evalConstant(r.name, env, c); !found {
					return nil, false
				}
			}
			d, isF32 := t.Data.([]float32)
			if !isF32 {
				return nil, false
			}
			if p.constScalar(r.name) {
				if len(d) != 1 {
					return nil, false
				}
				ops[k][q] = chainOperand{member: -1, scalar: d[0], isScal: true}
				scalarRank = max(scalarRank, len(t.Shape))
				continue
			}
			if shape == nil {
				shape, size = t.Shape, len(d)
			} else if !tensor.SameShape(shape, t.Shape) {
				return nil, false
			}
			ops[k][q] = chainOperand{member: -1, full: d}
		}
		if m.op == "Pow" && (ops[k][0].isScal || !ops[k][1].isScal) {
			return nil, false
		}
		if _, bin := chainArith[m.op]; bin && ops[k][0].isScal && ops[k][1].isScal {
			return nil, false
		}
	}
	// a scalar of higher rank than the data would widen the output's shape
	if shape == nil || scalarRank > len(shape) {
		return nil, false
	}
	ar := c.Arena()
	outs = make([]*tensor.Tensor, len(ch.members))
	elided := make([]bool, len(ch.members))
	nElided := 0
	for k, m := range ch.members {
		if !m.outside && c.run.unobserved[p.Steps[m.step].Node.Outputs[0]] {
			elided[k] = true
			nElided++
			continue
		}
		outs[k] = ar.NewUninit(tensor.Float32, shape)
	}
	parFor(size, elemChunk, func(lo, hi int) {
		var scratch *[]float32
		if nElided > 0 {
			scratch = getF32(nElided * chainChunk)
			defer putF32(scratch)
		}
		bufs := make([][]float32, len(ch.members))
		for a := lo; a < hi; a += chainChunk {
			b := min(hi, a+chainChunk)
			e := 0
			for k := range ch.members {
				if elided[k] {
					bufs[k] = (*scratch)[e*chainChunk : e*chainChunk+b-a]
					e++
				} else {
					bufs[k] = outs[k].F32()[a:b]
				}
			}
			for k, m := range ch.members {
				var args [2][]float32
				for q := range ops[k] {
					if o := &ops[k][q]; o.member >= 0 {
						args[q] = bufs[o.member]
					} else if !o.isScal {
						args[q] = o.full[a:b]
					}
				}
				dst := bufs[k]
				switch {
				case m.unary != nil:
					m.unary(dst, args[0])
				case m.op == "Pow":
					powScalarF32(dst, args[0], ops[k][1].scalar)
				case ops[k][1].isScal:
					vsF32(m.arith, dst, args[0], ops[k][1].scalar, false)
				case ops[k][0].isScal:
					vsF32(m.arith, dst, args[1], ops[k][0].scalar, true)
				default:
					vvF32(m.arith, dst, args[0], args[1])
				}
			}
		}
	})
	return outs, true
}

// powScalarF32 is dst = x^y for a scalar exponent, in float32 as the Pow
// kernel computes it: x·x for y = 2, else float64 math.Pow rounded.
func powScalarF32(dst, x []float32, y float32) {
	dst = dst[:len(x)]
	if y == 2 {
		for i, v := range x {
			dst[i] = v * v
		}
		return
	}
	for i, v := range x {
		dst[i] = float32(math.Pow(float64(v), float64(y)))
	}
}
