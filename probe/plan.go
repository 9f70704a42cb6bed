package probe

import (
	"container/heap"
	"errors"
	"fmt"
	"runtime/debug"
	"sort"
	"strings"
	"sync/atomic"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Hook observes a node's outputs right after the node has run. Outputs are
// read-only for the hook; they may be released once the hook returns.
type Hook func(n *loader.Node, outs []*tensor.Tensor) error

// Plan is a compiled graph: nodes in topological order, each with its kernel,
// and for every value the step after which it is no longer needed.
type Plan struct {
	// Graph is the graph the plan runs (the model's, or a subgraph's).
	Graph *loader.Graph
	// Opsets maps each operator domain ("" for the default) to the model's
	// opset version, which chose each step's kernel.
	Opsets map[string]int64
	// Steps are the nodes in a topological order, each with its kernel:
	// the order Run executes them and calls the hook.
	Steps []Step
	// Depth[i] is the longest path from a graph input to step i (in nodes).
	Depth []int
	// release[i] lists the values whose last reader is step i: Run drops
	// them after that step and RunRecycled may hand their storage back.
	release [][]string
	sub     map[*loader.Graph]*Plan
	// consts holds the initializer tensors: a kernel input that is one of
	// them (directly or passed on by Identity) is immutable for the plan's life.
	consts map[*tensor.Tensor]bool
	// producedAt maps each value to the step producing it.
	producedAt map[string]int
	// Debug keeps Go stack traces in kernel panic errors.
	Debug bool
	// view[i] is the node the hook is given for step i: nil for the main
	// graph (the step's own node), the qualified copy for a subgraph (flat.go).
	view []*loader.Node
	// runs counts the runs of this plan (of a subgraph: one per branch
	// taken or iteration), for the coverage of the report.
	runs atomic.Int64
	// flat is the main plan's flat view (flat.go).
	flat *Flat
	// chains maps the first step of each elementwise chain to it (fuse_chain.go).
	chains map[int]*elemChain
}

// Step is one node with its chosen kernel.
type Step struct {
	Node   *loader.Node
	Kernel Kernel
	Opset  int
	// fuseWith is the activation step this step may compute too (fuse.go), or −1.
	fuseWith int
	// fuseMul is the Mul step of a SiLU (x·sigmoid(x), fuseWith being the
	// Sigmoid) this step may compute too, or −1.
	fuseMul int
	// biasAdd is the Add step that adds a constant bias to this MatMul
	// step's product, which may then be computed in place (fuse_bias.go), or −1.
	biasAdd int
	// sigLocal: with fuseMul, the Sigmoid's output is read by the Mul alone
	// and is no graph output
	sigLocal bool
	// inChain: the step is a later member of an elementwise chain, whose
	// first step may compute its output (fuse_chain.go).
	inChain bool
}

// UnsupportedError lists the operators that have no kernel, one entry per
// node that uses one (subgraphs included), in schedule order.
type UnsupportedError struct{ Uses []UnsupportedUse }

// UnsupportedUse is one node whose operator has no kernel.
type UnsupportedUse struct {
	Node, Op, Domain string // Domain is "ai.onnx" for the default domain
	Opset            int
}

// Error gives one line per operator type (domain, op, opset): how many nodes
// use it and the first of them, so a model with a hundred uses of one
// operator reads as one line.
func (e *UnsupportedError) Error() string {
	type group struct {
		first string
		n     int
	}
	var order []UnsupportedUse
	groups := map[UnsupportedUse]*group{}
	for _, u := range e.Uses {
		k := UnsupportedUse{Op: u.Op, Domain: u.Domain, Opset: u.Opset}
		if g := groups[k]; g != nil {
			g.n++
			continue
		}
		groups[k] = &group{first: u.Node, n: 1}
		order = append(order, k)
	}
	var b strings.Builder
	fmt.Fprintf(&b, "%d unsupported operator type(s) in %d node(s):", len(order), len(e.Uses))
	for _, k := range order {
		g := groups[k]
		nodes := "1 node"
		if g.n > 1 {
			nodes = fmt.Sprintf("%d nodes, first", g.n)
		}
		fmt.Fprintf(&b, "\n  %s (domain %s, opset %d): %s %q", k.Op, k.Domain, k.Opset, nodes, g.first)
	}
	return b.String()
}

// Compile orders the model's graph and picks kernels.
func Compile(m *loader.Model) (*Plan, error) {
	p, err := compileGraph(m.Graph, m.Opsets, nil)
	if err != nil {
		return nil, err
	}
	p.flat = flatten(p)
	return p, nil
}

func compileGraph(g *loader.Graph, opsets map[string]int64, outer map[string]bool) (*Plan, error) {
	p := &Plan{Graph: g, Opsets: opsets, sub: map[*loader.Graph]*Plan{}, consts: map[*tensor.Tensor]bool{}}
	known := map[string]int{} // value -> depth of producer
	for name := range outer {
		known[name] = 0
	}
	for name, t := range g.Initializers {
		known[name] = 0
		p.consts[t] = true
	}
	for _, in := range g.Inputs {
		known[in.Name] = 0
	}
	// Kahn's algorithm over nodes, stable in file order: it schedules exactly
	// as repeated sweeps over the waiting nodes in file order would (each sweep
	// takes every node whose inputs are known when the sweep reaches it), but
	// in O(n log n), so a hostile file listing a long chain backwards cannot
	// stall the compiler. A node waits on the distinct input names not yet
	// known; when the last one becomes known it joins the current sweep if the
	// sweep has not passed its position yet, else the next sweep.
	produced := map[string]bool{}
	for _, n := range g.Nodes {
		for _, o := range n.Outputs {
			if o != "" {
				produced[o] = true
			}
		}
	}
	missing := make([]int, len(g.Nodes))
	waiters := map[string][]int{}
	var sweep, next intHeap
	for i, n := range g.Nodes {
		seen := map[string]bool{}
		for _, in := range n.Inputs {
			if _, ok := known[in]; in == "" || ok || seen[in] {
				continue
			}
			seen[in] = true
			missing[i]++
			waiters[in] = append(waiters[in], i)
		}
		if missing[i] == 0 {
			sweep = append(sweep, i)
		}
	}
	var unsupported []UnsupportedUse
	scheduled := make([]bool, len(g.Nodes))
	for len(sweep) > 0 {
		cursor := -1
		for len(sweep) > 0 {
			i := heap.Pop(&sweep).(int)
			cursor = i
			n := g.Nodes[i]
			scheduled[i] = true
			depth := 0
			for _, in := range n.Inputs {
				if in != "" {
					depth = max(depth, known[in])
				}
			}
			opset := int(opsets[normDomain(n.Domain)])
			if _, ok := opsets[normDomain(n.Domain)]; !ok && n.Domain == "" {
				opset = 1
			}
			k, ok := Lookup(n.Domain, n.OpType, opset)
			if !ok {
				dom := n.Domain
				if dom == "" {
					dom = "ai.onnx"
				}
				unsupported = append(unsupported, UnsupportedUse{Node: n.Name, Op: n.OpType, Domain: dom, Opset: opset})
			}
			// Subgraphs see every value of this graph and of the outer scopes.
			for _, a := range n.Attrs {
				for _, sg := range attrGraphs(a) {
					scope := map[string]bool{}
					for k := range known {
						scope[k] = true
					}
					for k := range produced {
						scope[k] = true
					}
					sp, err := compileGraph(sg, opsets, scope)
					if err != nil {
						var ue *UnsupportedError
						if errors.As(err, &ue) {
							unsupported = append(unsupported, ue.Uses...)
							continue
						}
						return nil, fmt.Errorf("node %q (%s) subgraph %q: %w", n.Name, n.OpType, a.Name, err)
					}
					p.sub[sg] = sp
					for g2, p2 := range sp.sub {
						p.sub[g2] = p2
					}
				}
			}
			p.Steps = append(p.Steps, Step{Node: n, Kernel: k, Opset: opset, fuseWith: -1, fuseMul: -1})
			p.Depth = append(p.Depth, depth+1)
			for _, o := range n.Outputs {
				if o == "" {
					continue
				}
				_, was := known[o]
				known[o] = depth + 1
				if was {
					continue
				}
				for _, w := range waiters[o] {
					if missing[w]--; missing[w] == 0 {
						if w > cursor {
							heap.Push(&sweep, w)
						} else {
							next = append(next, w)
						}
					}
				}
				delete(waiters, o)
			}
		}
		sweep, next = next, nil
		heap.Init(&sweep)
	}
	if len(p.Steps) < len(g.Nodes) {
		var pending []*loader.Node
		for i, n := range g.Nodes {
			if !scheduled[i] {
				pending = append(pending, n)
			}
		}
		return nil, cycleError(pending, known, produced)
	}
	if len(unsupported) > 0 {
		return nil, &UnsupportedError{Uses: unsupported}
	}
	for _, o := range g.Outputs {
		if _, ok := known[o.Name]; !ok {
			return nil, fmt.Errorf("graph output %q is produced by no node", o.Name)
		}
	}
	p.producedAt = map[string]int{}
	for i, s := range p.Steps {
		for _, o := range s.Node.Outputs {
			if o != "" {
				p.producedAt[o] = i
			}
		}
	}
	p.computeRelease()
	p.markFusions()
	return p, nil
}

func cycleError(pending []*loader.Node, known map[string]int, produced map[string]bool) error {
	var names []string
	for _, n := range pending {
		for _, in := range n.Inputs {
			if _, ok := known[in]; in != "" && !ok && !produced[in] {
				return fmt.Errorf("node %q (%s): input %q is not a graph input, an initializer or any node's output", n.Name, n.OpType, in)
			}
		}
		names = append(names, fmt.Sprintf("%q", n.Name))
	}
	if len(names) > 8 {
		names = append(names[:8], "...")
	}
	return fmt.Errorf("graph has a cycle: nodes %s wait on each other", strings.Join(names, ", "))
}

// computeRelease finds, for each produced value, the last step that reads it.
func (p *Plan) computeRelease() {
	keep := map[string]bool{}
	for _, o := range p.Graph.Outputs {
		keep[o.Name] = true
	}
	producedAt := p.producedAt
	last := map[string]int{}
	for v, i := range producedAt {
		last[v] = i
	}
	for i, s := range p.Steps {
		for _, in := range s.Node.Inputs {
			if _, ok := producedAt[in]; ok {
				last[in] = max(last[in], i)
			}
		}
		// values read by subgraphs stay alive until this step ends
		for _, g := range subgraphs(s.Node) {
			for _, name := range freeNames(g) {
				if _, ok := producedAt[name]; ok {
					last[name] = max(last[name], i)
				}
			}
		}
	}
	p.release = make([][]string, len(p.Steps))
	names := make([]string, 0, len(last))
	for name := range last {
		names = append(names, name)
	}
	sort.Strings(names)
	for _, name := range names {
		if !keep[name] && name != "" {
			p.release[last[name]] = append(p.release[last[name]], name)
		}
	}
}

// freeNames lists the names a graph (and its nested subgraphs) reads from outer scopes.
func freeNames(g *loader.Graph) []string {
	local := map[string]bool{}
	for n := range g.Initializers {
		local[n] = true
	}
	for _, in := range g.Inputs {
		local[in.Name] = true
	}
	for _, n := range g.Nodes {
		for _, o := range n.Outputs {
			local[o] = true
		}
	}
	var out []string
	for _, n := range g.Nodes {
		for _, in := range n.Inputs {
			if in != "" && !local[in] {
				out = append(out, in)
			}
		}
		for _, sg := range subgraphs(n) {
			for _, name := range freeNames(sg) {
				if !local[name] {
					out = append(out, name)
				}
			}
		}
	}
	return out
}

// Scope maps value names to tensors, falling back to an enclosing scope.
type Scope struct {
	vals   map[string]*tensor.Tensor
	parent *Scope
}

// Get resolves a name through the scope chain.
func (s *Scope) Get(name string) (*tensor.Tensor, bool) {
	for ; s != nil; s = s.parent {
		if t, ok := s.vals[name]; ok {
			return t, true
		}
	}
	return nil, false
}

type runState struct {
	plan *Plan
	hook Hook
	// arena is the run's memory: its budget and buffer pool (nil: the
	// process default budget, no pool).
	arena *tensor.Arena
	// unobserved names the values the hook does not read (RunRecycled).
	unobserved map[string]bool
}

// Run executes the plan on one batch of named inputs and returns the graph
// outputs by name. hook (may be nil) sees every node's outputs.
func (p *Plan) Run(inputs map[string]*tensor.Tensor, hook Hook) (map[string]*tensor.Tensor, error) {
	if err := p.checkInputs(inputs); err != nil {
		return nil, err
	}
	return p.run(nil, inputs, nil, hook)
}

// RunRecycled is Run that hands a released value (one no later step reads)
// to dead as soon as the step that read it last is done and the hook has
// seen that step's outputs, when the value was produced by a step of this
// run and its storage overlaps no value still alive: no later step's input,
// no graph output, no output computed ahead by a fused step. dead may then
// reuse that storage for the rest of the run (tensor.Pool.Put, once the
// hook's own readers are done with it). The released values it does not get
// (all of them when dead is nil) are returned, for tensor.Pool.Recycle after
// the batch. Kernels allocate from arena (the run's budget and buffer pool;
// nil: the process default budget, no pool). unobserved (may be nil) names
// the values hook does not read: a chain then skips writing those of its
// values no other step reads, and hook sees nil in their place. The plan
// is not changed: runs may share it.
func (p *Plan) RunRecycled(arena *tensor.Arena, inputs map[string]*tensor.Tensor, hook Hook, dead func(*tensor.Tensor), unobserved map[string]bool) (map[string]*tensor.Tensor, []*tensor.Tensor, error) {
	if err := p.checkInputs(inputs); err != nil {
		return nil, nil, err
	}
	var released []*tensor.Tensor
	out, err := p.runCollect(&runState{plan: p, hook: hook, arena: arena, unobserved: unobserved}, inputs, nil, &released, dead)
	return out, released, err
}

func (p *Plan) run(arena *tensor.Arena, inputs map[string]*tensor.Tensor, parent *Scope, hook Hook) (map[string]*tensor.Tensor, error) {
	return p.runCollect(&runState{plan: p, hook: hook, arena: arena}, inputs, parent, nil, nil)
}

func (p *Plan) runCollect(rs *runState, inputs map[string]*tensor.Tensor, parent *Scope, released *[]*tensor.Tensor, dead func(*tensor.Tensor)) (map[string]*tensor.Tensor, error) {
	env := &Scope{vals: make(map[string]*tensor.Tensor, len(p.Graph.Initializers)+len(inputs)+16), parent: parent}
	for name, t := range p.Graph.Initializers {
		env.vals[name] = t
	}
	for name, t := range inputs {
		env.vals[name] = t
	}
	p.runs.Add(1)
	hook := rs.hook
	var rec *recycler
	if dead != nil && released != nil {
		rec = newRecycler(env, dead)
	}
	// fused[j]: step j's output, computed already by the step fused with it
	var fused map[int]*tensor.Tensor
	for i := range p.Steps {
		s := &p.Steps[i]
		c := &Call{Node: s.Node, Opset: s.Opset, Scope: env, sub: p.sub, run: rs}
		c.In = make([]*tensor.Tensor, len(s.Node.Inputs))
		for j, name := range s.Node.Inputs {
			if name == "" {
				continue
			}
			t, ok := env.Get(name)
			if !ok {
				return nil, fmt.Errorf("node %q (%s): input %q has no value", s.Node.Name, s.Node.OpType, name)
			}
			c.In[j] = t
		}
		c.Out = make([]*tensor.Tensor, len(s.Node.Outputs))
		elided := false // a chain's value left unwritten (nil)
		if t, ok := fused[i]; ok {
			c.Out[0], elided = t, t == nil
			delete(fused, i)
		} else if outs, ok := p.chainFor(i, env, c); ok {
			c.Out[0], elided = outs[0], outs[0] == nil
			if fused == nil {
				fused = map[int]*tensor.Tensor{}
			}
			for k, m := range p.chains[i].members[1:] {
				fused[m.step] = outs[k+1]
			}
		} else {
			c.fuse = p.fuseFor(i, env, c)
			if err := p.call(s, c); err != nil {
				return nil, err
			}
			if s.biasAdd >= 0 && rs.unobserved[s.Node.Outputs[0]] && c.Out[0] != nil {
				if sum := p.biasInPlace(i, c.Out[0], env); sum != nil {
					if fused == nil {
						fused = map[int]*tensor.Tensor{}
					}
					fused[s.biasAdd] = sum
					c.Out[0], elided = nil, true
				}
			}
			if c.fuse != nil && c.fuse.out != nil {
				if fused == nil {
					fused = map[int]*tensor.Tensor{}
				}
				fused[s.fuseWith] = c.fuse.out
				if c.fuse.mul != nil {
					fused[s.fuseMul] = c.fuse.mul
				}
				if c.fuse.noSig {
					// the sigmoid went unwritten: its buffer back, nil to the hook
					if rs.arena != nil && rs.arena.Pool != nil {
						rs.arena.Pool.Put(c.fuse.out)
					}
					fused[s.fuseWith] = nil
				}
			}
		}
		for j, name := range s.Node.Outputs {
			if name == "" {
				continue
			}
			if c.Out[j] == nil && elided {
				env.vals[name] = nil // read only by the chain, which is done
				continue
			}
			if c.Out[j] == nil {
				return nil, fmt.Errorf("node %q (%s): kernel produced no output %d (%q)", s.Node.Name, s.Node.OpType, j, name)
			}
			// Kernels that allocate with make rather than tensor.New are held
			// to the memory budget here, before the run goes on.
			if err := rs.arena.CheckBytes(tensor.Bytes(c.Out[j].DType, c.Out[j].Size()), func() string { return fmt.Sprintf("output %q %v", name, c.Out[j]) }); err != nil {
				return nil, fmt.Errorf("node %q (%s): %w", s.Node.Name, s.Node.OpType, err)
			}
			env.vals[name] = c.Out[j]
		}
		if hook != nil {
			// the one hook call: a subgraph's steps pass their qualified node
			node := s.Node
			if p.view != nil {
				node = p.view[i]
			}
			outs := c.Out
			if len(c.observed) > 0 { // a kernel's internal tensors (Call.Observe) after the outputs
				outs = append(append(make([]*tensor.Tensor, 0, len(c.Out)+len(c.observed)), c.Out...), c.observed...)
			}
			if err := hook(node, outs); err != nil {
				return nil, fmt.Errorf("node %q (%s): %w", node.Name, s.Node.OpType, err)
			}
		}
		if rec != nil {
			rec.add(s.Node.Outputs, env)
		}
		var gone []*tensor.Tensor
		for _, name := range p.release[i] {
			if t := env.vals[name]; released != nil && t != nil && t.DType == tensor.Float32 {
				gone = append(gone, t)
			}
			delete(env.vals, name)
			if rec != nil {
				delete(rec.live, name)
			}
		}
		if rec != nil {
			*released = rec.settle(gone, fused, *released)
		} else if released != nil {
			*released = append(*released, gone...)
		}
	}
	out := make(map[string]*tensor.Tensor, len(p.Graph.Outputs))
	for _, o := range p.Graph.Outputs {
		t, ok := env.Get(o.Name)
		if !ok {
			return nil, fmt.Errorf("graph output %q has no value", o.Name)
		}
		out[o.Name] = t
	}
	return out, nil
}

// call runs one kernel, turning a kernel panic into an error that names the node.
func (p *Plan) call(s *Step, c *Call) (err error) {
	defer func() {
		if r := recover(); r != nil {
			// An allocation over the memory budget is the model's doing, not a bug.
			if be, ok := r.(*tensor.BudgetError); ok {
				err = fmt.Errorf("node %q (%s): %w", s.Node.Name, s.Node.OpType, be)
				return
			}
			msg := fmt.Sprint(r)
			if p.Debug {
				msg += "\n" + string(debug.Stack())
			}
			err = fmt.Errorf("node %q (%s): internal error: %s", s.Node.Name, s.Node.OpType, msg)
		}
	}()
	if err := s.Kernel(c); err != nil {
		return fmt.Errorf("node %q (%s): %w", s.Node.Name, s.Node.OpType, err)
	}
	return nil
}

// RunSubgraph runs a subgraph attribute of the current node with the given
// inputs bound to the subgraph's inputs in order; outer values resolve through
// c.Scope. The run's hook sees every node of the subgraph, under its
// qualified name (flat.go).
func (c *Call) RunSubgraph(g *loader.Graph, inputs []*tensor.Tensor) ([]*tensor.Tensor, error) {
	sp, ok := c.sub[g]
	if !ok {
		return nil, errors.New("subgraph was not compiled")
	}
	if len(inputs) > len(g.Inputs) {
		return nil, fmt.Errorf("subgraph %q takes %d inputs, got %d", g.Name, len(g.Inputs), len(inputs))
	}
	in := make(map[string]*tensor.Tensor, len(inputs))
	for i, t := range inputs {
		if t != nil {
			in[g.Inputs[i].Name] = t
		}
	}
	var hook Hook
	if c.run != nil {
		hook = c.run.hook
	}
	res, err := sp.run(c.Arena(), in, c.Scope, hook)
	if err != nil {
		return nil, fmt.Errorf("subgraph %q: %w", g.Name, err)
	}
	outs := make([]*tensor.Tensor, len(g.Outputs))
	for i, o := range g.Outputs {
		outs[i] = res[o.Name]
	}
	return outs, nil
}

// checkInputs validates presence, dtype and rank/fixed dims of the graph inputs.
func (p *Plan) checkInputs(inputs map[string]*tensor.Tensor) error {
	for _, vi := range p.Graph.Inputs {
		t, ok := inputs[vi.Name]
		if !ok {
			return fmt.Errorf("input %q is missing (the model has inputs %s)", vi.Name, inputNames(p.Graph))
		}
		if !vi.HasType {
			continue
		}
		want := vi.DType
		if want == tensor.Float16 || want == tensor.BFloat16 {
			want = tensor.Float32
		}
		if t.DType != want {
			return fmt.Errorf("input %q: model expects %v, got %v", vi.Name, vi.DType, t.DType)
		}
		if vi.Shape != nil {
			if len(vi.Shape) != len(t.Shape) {
				return fmt.Errorf("input %q: model expects shape %s, got %v", vi.Name, ShapeString(vi), t.Shape)
			}
			for i, d := range vi.Shape {
				if d >= 0 && d != t.Shape[i] {
					return fmt.Errorf("input %q: model expects shape %s, got %v", vi.Name, ShapeString(vi), t.Shape)
				}
			}
		}
	}
	return nil
}

func inputNames(g *loader.Graph) string {
	var s []string
	for _, in := range g.Inputs {
		s = append(s, fmt.Sprintf("%q", in.Name))
	}
	return strings.Join(s, ", ")
}

// ShapeString renders a declared shape with symbolic dims by name, e.g. [batch 3 224 224].
func ShapeString(vi loader.ValueInfo) string {
	parts := make([]string, len(vi.Shape))
	for i, d := range vi.Shape {
		switch {
		case d >= 0:
			parts[i] = fmt.Sprint(d)
		case i < len(vi.Symbols) && vi.Symbols[i] != "":
			parts[i] = vi.Symbols[i]
		default:
			parts[i] = "?"
		}
	}
	return "[" + strings.Join(parts, " ") + "]"
}

// intHeap is a min-heap of node positions.
type intHeap []int

func (h intHeap) Len() int           { return len(h) }
func (h intHeap) Less(i, j int) bool { return h[i] < h[j] }
func (h intHeap) Swap(i, j int)      { h[i], h[j] = h[j], h[i] }
func (h *intHeap) Push(x any)        { *h = append(*h, x.(int)) }
func (h *intHeap) Pop() any {
	old := *h
	x := old[len(old)-1]
	*h = old[:len(old)-1]
	return x
}

// subgraphs lists a node's graph attributes (If's branches, Loop's and
// Scan's bodies) in a slice of its own, in no set order (Attrs is a map;
// every caller treats them as a set).
func subgraphs(n *loader.Node) []*loader.Graph {
	var gs []*loader.Graph
	for _, a := range n.Attrs {
		gs = append(gs, attrGraphs(a)...)
	}
	return gs
}

// attrGraphs lists one attribute's graphs (Graphs, then G) in a slice of its own.
func attrGraphs(a *loader.Attr) []*loader.Graph {
	gs := append([]*loader.Graph{}, a.Graphs...)
	if a.G != nil {
		gs = append(gs, a.G)
	}
	return gs
}
