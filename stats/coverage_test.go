package stats

import (
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// A Loop nested in the then branch of an If, run only with the condition
// false: the then branch and the loop body inside it never run. Each of
// their nodes is listed, the body's with the outermost subgraph that never
// ran as the reason; the else branch's node is observed. Known answers
// worked out by hand from the graph.
func TestCoverageNestedNeverRan(t *testing.T) {
	graph := func(name string, inputs, outputs []string, nodes ...*loader.Node) *loader.Graph {
		g := &loader.Graph{Name: name, Initializers: map[string]*tensor.Tensor{}, Nodes: nodes}
		for _, in := range inputs {
			g.Inputs = append(g.Inputs, loader.ValueInfo{Name: in})
		}
		for _, o := range outputs {
			g.Outputs = append(g.Outputs, loader.ValueInfo{Name: o, DType: tensor.Float32})
		}
		return g
	}
	add := func(name, a, b, out string) *loader.Node {
		return &loader.Node{Name: name, OpType: "Add", Inputs: []string{a, b}, Outputs: []string{out}, Attrs: map[string]*loader.Attr{}}
	}
	body := graph("body", []string{"i", "cond", "y"}, []string{"cond", "y2"}, add("/step/Add", "y", "x", "y2"))
	loop := &loader.Node{Name: "/Loop", OpType: "Loop", Inputs: []string{"M", "", "x"}, Outputs: []string{"yf"},
		Attrs: map[string]*loader.Attr{"body": {Name: "body", Kind: loader.AttrGraph, G: body}}}
	then := graph("then", nil, []string{"yf"}, loop)
	els := graph("else", nil, []string{"e"}, add("/twice/Add", "x", "x", "e"))
	iff := &loader.Node{Name: "/If", OpType: "If", Inputs: []string{"c"}, Outputs: []string{"r"},
		Attrs: map[string]*loader.Attr{"then_branch": {Kind: loader.AttrGraph, G: then}, "else_branch": {Kind: loader.AttrGraph, G: els}}}
	m := &loader.Model{Opsets: map[string]int64{"": 13}, Graph: graph("main", []string{"c", "M", "x"}, []string{"r"}, iff)}
	p, err := probe.Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	c := NewCollector(m, p)
	in := map[string]*tensor.Tensor{"c": tensor.From([]bool{false}), "M": tensor.From([]int64{2}), "x": tensor.From([]float32{1, 2}, 2)}
	if _, err := p.Run(in, c.Hook); err != nil {
		t.Fatal(err)
	}
	for _, n := range p.Flat().Graph.Nodes {
		if c.InSubgraph(n) != (n.Name != "/If") {
			t.Errorf("InSubgraph(%s) = %v", n.Name, c.InSubgraph(n))
		}
	}
	if c.InSubgraph(iff) {
		t.Errorf("InSubgraph(/If) = true")
	}
	r := c.Finish("file").Report
	cov := r.Coverage
	if cov.Nodes != 4 || cov.InSubgraphs != 3 || cov.Executed != 2 || cov.Observed != 2 {
		t.Fatalf("coverage %+v, want 4 nodes (3 in subgraphs), 2 executed and observed", cov)
	}
	want := map[string]string{
		"/If/then/Loop/body/step/Add": "inside /If/then/Loop/body: then_branch of /If never taken on this sample",
		"/If/then/Loop":               "then_branch of /If never taken on this sample",
	}
	if len(cov.NotObserved) != len(want) {
		t.Fatalf("not observed %+v", cov.NotObserved)
	}
	for _, u := range cov.NotObserved {
		if want[u.Node] != u.Reason {
			t.Errorf("%s: reason %q, want %q", u.Node, u.Reason, want[u.Node])
		}
	}
	if l := r.LayerByNode("/If/else/twice/Add"); l == nil || l.Count != 2 || *l.Mean != 3 {
		t.Errorf("else branch layer %+v, want 2 values of mean 3", l)
	}
	runs := map[string]int64{}
	for _, s := range cov.Subgraphs {
		runs[s.Name] = s.Runs
	}
	if runs["/If/then"] != 0 || runs["/If/then/Loop/body"] != 0 || runs["/If/else"] != 1 {
		t.Errorf("subgraph runs %v", runs)
	}
}
