package probe

import (
	"sort"
	"strconv"
	"strings"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Flat is the whole model as the hook sees it: the main graph's nodes and,
// just before each control-flow node (If, Loop, Scan), the nodes of its
// subgraphs, recursively, under qualified names. The nodes inside a subgraph
// run while the control-flow node's kernel runs, so their hook calls come
// before the control-flow node's own, in this order.
//
// Naming (docs/subgraphs.md): a node or value inside a subgraph is named
//
//	<control-flow node>/<label>/<inner name>
//
// where label is "then" or "else" for If's then_branch and else_branch,
// "body" for the body of Loop and Scan, and the attribute name for any other
// graph attribute (with "#k" appended for the k-th graph of a list). One
// leading "/" of the inner name is dropped, so PyTorch's "/conv1/Conv" in the
// then branch of "/If" is "/If/then/conv1/Conv". The control-flow node's name
// is itself qualified when it sits in a subgraph, so nesting reads as a path.
// Values a subgraph reads from an enclosing scope keep that scope's name.
type Flat struct {
	// Graph holds every node (subgraph nodes as qualified copies; the main
	// graph's nodes are the loader's own), every initializer (a subgraph's
	// under its qualified name) and the main graph's inputs, outputs and
	// declared value types (a subgraph's under qualified names). It is a view
	// for analysis, not a graph to run.
	Graph *loader.Graph
	// Depth[i] is the depth of Graph.Nodes[i]: a node inside a subgraph lies
	// at its control-flow node's depth − 1 plus its depth within the subgraph.
	Depth []int
	// In[i] is the index in Subgraphs of the subgraph holding Graph.Nodes[i],
	// −1 for the main graph.
	In []int
	// Subgraphs lists every subgraph, enclosing ones before the ones they hold.
	Subgraphs []Subgraph
}

// Subgraph is one graph attribute of a control-flow node.
type Subgraph struct {
	// Owner is the control-flow node (as named in Flat.Graph).
	Owner *loader.Node
	// Parent is the index of the enclosing subgraph, −1 for the main graph.
	Parent int
	// Attr is the graph attribute (then_branch, else_branch, body, …), Label its short form in names.
	Attr, Label string
	// Prefix is Owner.Name + "/" + Label: every name inside starts with it and a "/".
	Prefix string
	// Inputs are the qualified names of the subgraph's formal inputs, bound
	// by the control-flow node at each run (Loop's iteration number,
	// condition and carried values; Scan's states and slices).
	Inputs []string
	// Outputs are the qualified names of the subgraph's formal outputs, in
	// order (an If branch's k-th output is the If node's k-th output).
	Outputs []string
	plan    *Plan
}

// Runs is how often the subgraph has been run since the model was compiled:
// an If branch once per batch that took it, a Loop or Scan body once per
// iteration. The count is the plan's: runs of one compiled plan on several
// goroutines at once all add to it.
func (s *Subgraph) Runs() int64 { return s.plan.runs.Load() }

// Flat returns the plan's flat view (built by Compile; nil for a plan of a subgraph).
func (p *Plan) Flat() *Flat { return p.flat }

// Runs is how often the plan has been run since it was compiled.
func (p *Plan) Runs() int64 { return p.runs.Load() }

// subgraphLabel is the short form of a graph attribute's name used in qualified names.
func subgraphLabel(attr string) string {
	switch attr {
	case "then_branch":
		return "then"
	case "else_branch":
		return "else"
	}
	return attr
}

// attrRank orders a node's graph attributes: then before else, then by name.
func attrRank(name string) int {
	switch name {
	case "then_branch":
		return 0
	case "else_branch":
		return 1
	}
	return 2
}

// qualify names a node or value inside the subgraph with the given prefix.
func qualify(prefix, name string) string {
	return prefix + "/" + strings.TrimPrefix(name, "/")
}

// renamer resolves a name seen inside a subgraph to its qualified name:
// the innermost scope that defines it wins; names no scope defines are the
// main graph's and stay as they are.
type renamer struct {
	local  map[string]string
	parent *renamer
}

func (r *renamer) name(n string) string {
	if n == "" {
		return ""
	}
	for ; r != nil; r = r.parent {
		if q, ok := r.local[n]; ok {
			return q
		}
	}
	return n
}

// flatten builds the flat view of a compiled main plan and gives every
// subgraph plan the qualified nodes its hook calls pass (Plan.view).
func flatten(p *Plan) *Flat {
	g := p.Graph
	fg := &loader.Graph{Name: g.Name, Initializers: make(map[string]*tensor.Tensor, len(g.Initializers)),
		InitOrder: append([]string{}, g.InitOrder...), Inputs: g.Inputs, DefaultInputs: g.DefaultInputs,
		Outputs: g.Outputs, ValueInfo: make(map[string]loader.ValueInfo, len(g.ValueInfo))}
	for k, t := range g.Initializers {
		fg.Initializers[k] = t
	}
	for k, v := range g.ValueInfo {
		fg.ValueInfo[k] = v
	}
	if g.Half != nil {
		fg.Half = make(map[string]tensor.DType, len(g.Half))
		for k, dt := range g.Half {
			fg.Half[k] = dt
		}
	}
	f := &Flat{Graph: fg}
	f.add(p, -1, 0, nil)
	return f
}

// add appends plan p's nodes (and, before each control-flow node, its
// subgraphs') to f; where is the index of p's subgraph (−1: main), base the
// depth its depths count from, names the resolution of outer names.
func (f *Flat) add(p *Plan, where, base int, names *renamer) {
	for i, s := range p.Steps {
		node := s.Node
		if p.view != nil {
			node = p.view[i]
		}
		depth := base + p.Depth[i]
		var attrs []string
		for name, a := range s.Node.Attrs {
			if len(attrGraphs(a)) > 0 {
				attrs = append(attrs, name)
			}
		}
		sort.Slice(attrs, func(a, b int) bool {
			ra, rb := attrRank(attrs[a]), attrRank(attrs[b])
			if ra != rb {
				return ra < rb
			}
			return attrs[a] < attrs[b]
		})
		for _, an := range attrs {
			gs := attrGraphs(s.Node.Attrs[an])
			for k, sg := range gs {
				sp := p.sub[sg]
				if sp == nil {
					continue
				}
				label := subgraphLabel(an)
				if len(gs) > 1 {
					label += "#" + strconv.Itoa(k)
				}
				f.addSub(sp, node, an, label, where, depth-1, names)
			}
		}
		f.Graph.Nodes = append(f.Graph.Nodes, node)
		f.Depth = append(f.Depth, depth)
		f.In = append(f.In, where)
	}
}

// addSub qualifies the subgraph plan sp of owner and appends its nodes.
func (f *Flat) addSub(sp *Plan, owner *loader.Node, attr, label string, parent, base int, names *renamer) {
	g := sp.Graph
	prefix := owner.Name + "/" + label
	r := &renamer{local: map[string]string{}, parent: names}
	def := func(n string) {
		if n != "" {
			r.local[n] = qualify(prefix, n)
		}
	}
	for _, in := range g.Inputs {
		def(in.Name)
	}
	for _, in := range g.DefaultInputs {
		def(in.Name)
	}
	for n := range g.Initializers {
		def(n)
	}
	for _, n := range g.Nodes {
		for _, o := range n.Outputs {
			def(o)
		}
	}
	k := len(f.Subgraphs)
	sub := Subgraph{Owner: owner, Parent: parent, Attr: attr, Label: label, Prefix: prefix, plan: sp}
	for _, in := range g.Inputs {
		sub.Inputs = append(sub.Inputs, r.name(in.Name))
	}
	for _, o := range g.Outputs {
		sub.Outputs = append(sub.Outputs, r.name(o.Name))
	}
	f.Subgraphs = append(f.Subgraphs, sub)
	for _, n := range g.InitOrder {
		f.Graph.InitOrder = append(f.Graph.InitOrder, r.name(n))
	}
	for n, t := range g.Initializers {
		f.Graph.Initializers[r.name(n)] = t
	}
	for n, vi := range g.ValueInfo {
		vi.Name = r.name(n)
		f.Graph.ValueInfo[vi.Name] = vi
	}
	sp.view = make([]*loader.Node, len(sp.Steps))
	for i, s := range sp.Steps {
		n := s.Node
		q := &loader.Node{Name: qualify(prefix, n.Name), OpType: n.OpType, Domain: n.Domain, Attrs: n.Attrs,
			Inputs: make([]string, len(n.Inputs)), Outputs: make([]string, len(n.Outputs))}
		for j, in := range n.Inputs {
			q.Inputs[j] = r.name(in)
		}
		for j, o := range n.Outputs {
			q.Outputs[j] = r.name(o)
		}
		sp.view[i] = q
	}
	f.add(sp, k, base, r)
}
