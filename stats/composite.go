package stats

import (
	"math"

	"github.com/vitals-health/vitals/loader"
)

// Activations that exporters write as a small subgraph instead of one
// operator. PyTorch 1.13 exports nn.SiLU as Mul(x, Sigmoid(x)) and nn.GELU
// as Mul(Mul(x, Add(Erf(Div(x, √2)), 1)), 0.5) (opsets before 20 have no
// Gelu); other exporters order the factors differently or write x/√2 as
// x·(1/√2). GELU's tanh approximation, ½x(1 + tanh(√(2/π)(x + 0.044715x³))),
// comes as PyTorch exports gelu(approximate="tanh") (x³ as x·(x·x)) or with
// Pow(x, 3) (GPT-2's own formula); Mish before opset 18 as
// Mul(x, Tanh(Softplus(x))). The node whose output is the activation ("top") is reported as
// an activation layer under the actkind name; the nodes inside the pattern
// (the Sigmoid, the Erf or Tanh and their helpers) are parts of it and get no unit
// statistics of their own.

// compositeForm is how each composite activation is written, for messages.
var compositeForm = map[string]string{"Swish": "x·sigmoid(x)", "Mish": "x·tanh(softplus(x))", "Gelu": "x·½·(1+erf(x/√2)) or its tanh approximation"}

// composite is what compositeActs found.
type composite struct {
	top   map[*loader.Node]string       // node → "Swish" or "Gelu"
	inner map[*loader.Node]*loader.Node // node inside a pattern → its top
	// biased: a MatMul by a constant matrix whose product only the Add of a
	// constant bias reads → that Add (biasedMatMul)
	biased map[*loader.Node]*loader.Node
}

// folded reports whether n's outputs are parts of a larger unit (a
// composite activation, or a dense layer's product before its bias) and
// so no layers of their own.
func (cp composite) folded(n *loader.Node) bool {
	_, in := cp.inner[n]
	return in || cp.biased[n] != nil
}

// compositeActs finds the SiLU/Swish and erf-GELU patterns in g.
func compositeActs(g *loader.Graph) composite {
	cp := composite{top: map[*loader.Node]string{}, inner: map[*loader.Node]*loader.Node{}, biased: map[*loader.Node]*loader.Node{}}
	producer := map[string]*loader.Node{}
	readers := map[string]int{}
	reader := map[string]*loader.Node{} // a (the last) node reading each value
	for _, n := range g.Nodes {
		for _, o := range n.Outputs {
			producer[o] = n
		}
		for _, in := range n.Inputs {
			readers[in]++
			reader[in] = n
		}
	}
	for _, o := range g.Outputs {
		readers[o.Name]++
	}
	// only reports whether name is read by one node (so it may be folded
	// into a pattern without hiding a value someone else uses)
	only := func(name string) bool { return readers[name] == 1 }
	scalar := func(name string, want, tol float64) bool {
		t, ok := constValue(g, name)
		return ok && t.Size() == 1 && math.Abs(t.Float64At(0)-want) <= tol
	}
	for _, m := range g.Nodes {
		if a := biasedMatMul(g, m, reader, only); a != nil {
			cp.biased[m] = a
		}
	}
	for _, m := range g.Nodes {
		if m.OpType != "Mul" || m.Domain != "" || len(m.Inputs) != 2 || len(m.Outputs) != 1 {
			continue
		}
		if s := swish(m, producer, only); s != nil {
			cp.top[m] = "Swish"
			cp.inner[s] = m
			continue
		}
		if parts := mish(m, producer, only); parts != nil {
			cp.top[m] = "Mish"
			for _, p := range parts {
				cp.inner[p] = m
			}
			continue
		}
		if parts := gelu(m, producer, only, scalar); parts != nil {
			cp.top[m] = "Gelu"
			for _, p := range parts {
				cp.inner[p] = m
			}
		}
	}
	// a top that is itself inside another pattern (cannot happen with the
	// patterns above, but keeps the two maps disjoint)
	for n := range cp.inner {
		delete(cp.top, n)
	}
	return cp
}

// biasedMatMul returns the Add that completes m as a dense layer, nil if
// none: m = MatMul(x, W) with W a constant float matrix [k, n] (an
// initializer, possibly through Identity or a Constant node; a quantized
// model's dequantized weights are left alone), its product read only by
// Add(product, b) (either order) with b a constant of n values along the
// last axis (shape [n], or [1, …, 1, n] of rank at most 2). That is how
// PyTorch exports nn.Linear on inputs of rank 3 and more, where a rank-2
// input gives Gemm with the bias inside: the product alone is the layer
// before its bias, the same values shifted per feature, and the layer the
// report names is the Add, as it names the Gemm or the Conv with its bias.
func biasedMatMul(g *loader.Graph, m *loader.Node, reader map[string]*loader.Node, only func(string) bool) *loader.Node {
	if m.OpType != "MatMul" || m.Domain != "" || len(m.Inputs) != 2 || len(m.Outputs) != 1 || m.Outputs[0] == "" || !only(m.Outputs[0]) {
		return nil
	}
	w, ok := plainConst(g, m.Inputs[1])
	if !ok || w.Rank() != 2 || !w.DType.IsFloat() {
		return nil
	}
	a := reader[m.Outputs[0]]
	if a == nil || a.OpType != "Add" || a.Domain != "" || len(a.Inputs) != 2 || len(a.Outputs) != 1 {
		return nil
	}
	b := a.Inputs[0]
	if b == m.Outputs[0] {
		b = a.Inputs[1]
	}
	if b == m.Outputs[0] {
		return nil
	}
	bias, ok := plainConst(g, b)
	if !ok || bias.DType != w.DType || bias.Rank() < 1 || bias.Rank() > 2 || bias.Shape[bias.Rank()-1] != w.Shape[1] || bias.Size() != w.Shape[1] {
		return nil
	}
	return a
}

// swish matches m = Mul(x, Sigmoid(x)) in either order and returns the
// Sigmoid node (nil when m does not match).
func swish(m *loader.Node, producer map[string]*loader.Node, only func(string) bool) *loader.Node {
	for i := 0; i < 2; i++ {
		x, sg := m.Inputs[i], m.Inputs[1-i]
		s := producer[sg]
		if s != nil && s.OpType == "Sigmoid" && s.Domain == "" && len(s.Inputs) == 1 && s.Inputs[0] == x && only(sg) {
			return s
		}
	}
	return nil
}

// mish matches m = Mul(x, Tanh(Softplus(x))) in either order (Misra 2019;
// how opsets before 18, which have no Mish, carry it) and returns the Tanh
// and Softplus nodes (nil when m does not match).
func mish(m *loader.Node, producer map[string]*loader.Node, only func(string) bool) []*loader.Node {
	for i := 0; i < 2; i++ {
		x, tv := m.Inputs[i], m.Inputs[1-i]
		t := producer[tv]
		if t == nil || t.OpType != "Tanh" || t.Domain != "" || len(t.Inputs) != 1 || !only(tv) {
			continue
		}
		sp := producer[t.Inputs[0]]
		if sp != nil && sp.OpType == "Softplus" && sp.Domain == "" && len(sp.Inputs) == 1 && sp.Inputs[0] == x && only(t.Inputs[0]) {
			return []*loader.Node{t, sp}
		}
	}
	return nil
}

// gelu matches the erf form of GELU, x·½·(1 + erf(x/√2)), ending at m:
// the factors of m (through nested Mul nodes read only by the pattern) must
// be x, the constant 0.5 and Add(Erf(x/√2), 1), where x/√2 is Div(x, √2) or
// Mul(x, 1/√2). It returns the nodes inside the pattern, nil when m does not
// match. Constants are compared with a tolerance of 1e-6 (float32 rounding of
// √2 and 1/√2 is about 6e-8 relative).
func gelu(m *loader.Node, producer map[string]*loader.Node, only func(string) bool,
	scalar func(name string, want, tol float64) bool) []*loader.Node {
	const tol = 1e-6
	var leaves []string
	var parts []*loader.Node
	var flatten func(n *loader.Node, depth int)
	flatten = func(n *loader.Node, depth int) {
		for _, in := range n.Inputs {
			if p := producer[in]; p != nil && p.OpType == "Mul" && p.Domain == "" && len(p.Inputs) == 2 && depth < 2 && only(in) {
				parts = append(parts, p)
				flatten(p, depth+1)
				continue
			}
			leaves = append(leaves, in)
		}
	}
	flatten(m, 0)
	if len(leaves) != 3 {
		return nil
	}
	var x, half, add string
	for _, l := range leaves {
		switch p := producer[l]; {
		case scalar(l, 0.5, tol):
			half = l
		case p != nil && p.OpType == "Add" && len(p.Inputs) == 2 && only(l):
			add = l
		default:
			x = l
		}
	}
	if x == "" || half == "" || add == "" {
		return nil
	}
	a := producer[add]
	var erfOut string
	switch {
	case scalar(a.Inputs[1], 1, tol):
		erfOut = a.Inputs[0]
	case scalar(a.Inputs[0], 1, tol):
		erfOut = a.Inputs[1]
	default:
		return nil
	}
	e := producer[erfOut]
	if e != nil && e.OpType == "Tanh" && len(e.Inputs) == 1 && only(erfOut) {
		inner := geluTanhArg(e.Inputs[0], x, producer, only, scalar)
		if inner == nil {
			return nil
		}
		return append(append(parts, a, e), inner...)
	}
	if e == nil || e.OpType != "Erf" || len(e.Inputs) != 1 || !only(erfOut) {
		return nil
	}
	d := producer[e.Inputs[0]]
	if d == nil || len(d.Inputs) != 2 || !only(e.Inputs[0]) {
		return nil
	}
	switch {
	case d.OpType == "Div" && d.Inputs[0] == x && scalar(d.Inputs[1], math.Sqrt2, tol):
	case d.OpType == "Mul" && d.Inputs[0] == x && scalar(d.Inputs[1], 1/math.Sqrt2, tol):
	case d.OpType == "Mul" && d.Inputs[1] == x && scalar(d.Inputs[0], 1/math.Sqrt2, tol):
	default:
		return nil
	}
	return append(parts, a, e, d)
}

// geluTanhArg matches the argument of the tanh in GELU's tanh
// approximation, √(2/π)·(x + 0.044715·x³) (Hendrycks & Gimpel 2016), with
// x³ as Pow(x, 3) or x·(x·x) in any order (PyTorch exports
// gelu(approximate="tanh") with the products), every value read only by
// the pattern; it returns the nodes, nil when t does not match.
func geluTanhArg(t, x string, producer map[string]*loader.Node, only func(string) bool,
	scalar func(name string, want, tol float64) bool) []*loader.Node {
	const tol = 1e-6
	// other returns the operand of binary node n that is not the scalar want
	other := func(n *loader.Node, want float64) string {
		switch {
		case scalar(n.Inputs[0], want, tol):
			return n.Inputs[1]
		case scalar(n.Inputs[1], want, tol):
			return n.Inputs[0]
		}
		return ""
	}
	binary := func(name, op string) *loader.Node {
		n := producer[name]
		if n == nil || n.OpType != op || n.Domain != "" || len(n.Inputs) != 2 || !only(name) {
			return nil
		}
		return n
	}
	k := binary(t, "Mul")
	if k == nil {
		return nil
	}
	sum := other(k, math.Sqrt(2/math.Pi))
	sa := binary(sum, "Add")
	if sa == nil {
		return nil
	}
	// partner returns the operand of binary node n beside x ("" if x is none)
	partner := func(n *loader.Node) string {
		switch x {
		case n.Inputs[0]:
			return n.Inputs[1]
		case n.Inputs[1]:
			return n.Inputs[0]
		}
		return ""
	}
	c := binary(partner(sa), "Mul")
	if c == nil {
		return nil
	}
	cube := other(c, 0.044715)
	nodes := []*loader.Node{k, sa, c}
	if pw := binary(cube, "Pow"); pw != nil {
		if pw.Inputs[0] != x || !scalar(pw.Inputs[1], 3, 0) {
			return nil
		}
		return append(nodes, pw)
	}
	m3 := binary(cube, "Mul")
	if m3 == nil {
		return nil
	}
	m2 := binary(partner(m3), "Mul")
	if m2 == nil || m2.Inputs[0] != x || m2.Inputs[1] != x {
		return nil
	}
	return append(nodes, m3, m2)
}

// Unobserved lists the node outputs the collector's hook does not read: the
// values inside recognised composite activations and the products of dense
// layers before their bias Add (biasedMatMul), which are no layers and
// which the transformer, quantization and float16 observers do not watch
// either. probe.Plan.RunRecycled takes the list: an executor that
// computes such a pattern in one pass need not write them.
func (c *Collector) Unobserved() map[string]bool {
	u := map[string]bool{}
	var folded []*loader.Node
	for n := range c.composite.inner {
		folded = append(folded, n)
	}
	for n := range c.composite.biased {
		folded = append(folded, n)
	}
	for _, n := range folded {
		for _, o := range n.Outputs {
			if o == "" || c.byOut[o] != nil || c.watched(o) {
				continue
			}
			u[o] = true
		}
	}
	return u
}

// watched reports whether one of the collector's special observers reads
// value name.
func (c *Collector) watched(name string) bool {
	if c.tf != nil && c.tf.entries[name] != nil {
		return true
	}
	if c.half != nil && c.half.acts[name] != nil {
		return true
	}
	if c.quant != nil && (c.quant.byInt[name] != nil || len(c.quant.byInput[name]) > 0) {
		return true
	}
	return false
}
