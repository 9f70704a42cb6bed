package probe

import (
	"fmt"
	"reflect"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// The hook sees every node of an executed If branch and Loop body under its
// qualified name (flat.go), once per run; the flat view lists them before
// their control-flow node, and a branch never taken has no runs. Known
// answers computed by hand from the graph below.
func TestHookSeesSubgraphNodes(t *testing.T) {
	// loop body(i, cond, y): y2 = y + step; s = y2 + y2 (step read from the main graph)
	body := ctlTestGraph("body", []string{"i", "cond", "y"}, []string{"cond", "y2", "s"},
		ctlAdd("y", "step", "y2"), ctlAdd("y2", "y2", "s"))
	loop := &loader.Node{Name: "/Loop", OpType: "Loop", Inputs: []string{"M", "", "y0"}, Outputs: []string{"yf", "scan"},
		Attrs: map[string]*loader.Attr{"body": {Name: "body", Kind: loader.AttrGraph, G: body}}}
	// then: the loop; else: one Add
	then := ctlTestGraph("then", nil, []string{"yf"}, loop)
	els := ctlTestGraph("else", nil, []string{"e"}, ctlAdd("y0", "y0", "e"))
	iff := &loader.Node{Name: "/If", OpType: "If", Inputs: []string{"c"}, Outputs: []string{"r"},
		Attrs: map[string]*loader.Attr{"then_branch": {Kind: loader.AttrGraph, G: then}, "else_branch": {Kind: loader.AttrGraph, G: els}}}
	g := ctlTestGraph("main", []string{"c", "M", "y0", "step"}, []string{"r"}, iff)
	p, err := Compile(&loader.Model{Opsets: map[string]int64{"": 13}, Graph: g})
	if err != nil {
		t.Fatal(err)
	}
	f := p.Flat()
	var names []string
	for i, n := range f.Graph.Nodes {
		names = append(names, fmt.Sprintf("%s %v->%v d%d in%d", n.Name, n.Inputs, n.Outputs, f.Depth[i], f.In[i]))
	}
	want := []string{
		"/If/then/Loop/body/add_y2 [/If/then/Loop/body/y step]->[/If/then/Loop/body/y2] d1 in1",
		"/If/then/Loop/body/add_s [/If/then/Loop/body/y2 /If/then/Loop/body/y2]->[/If/then/Loop/body/s] d2 in1",
		"/If/then/Loop [M  y0]->[/If/then/yf /If/then/scan] d1 in0",
		"/If/else/add_e [y0 y0]->[/If/else/e] d1 in2",
		"/If [c]->[r] d1 in-1",
	}
	if !reflect.DeepEqual(names, want) {
		t.Fatalf("flat nodes\n%q\nwant\n%q", names, want)
	}
	if got := f.Subgraphs[1].Inputs; !reflect.DeepEqual(got, []string{"/If/then/Loop/body/i", "/If/then/Loop/body/cond", "/If/then/Loop/body/y"}) {
		t.Fatalf("loop body inputs %q", got)
	}
	seen := map[string]int{}
	hook := func(n *loader.Node, outs []*tensor.Tensor) error {
		seen[n.Name]++
		return nil
	}
	in := map[string]*tensor.Tensor{"c": tensor.From([]bool{true}), "M": tensor.From([]int64{3}),
		"y0": tensor.From([]float32{1, 2}, 2), "step": tensor.From([]float32{10, 20}, 2)}
	res, err := p.Run(in, hook)
	if err != nil {
		t.Fatal(err)
	}
	ctlWant(t, res["r"], []int{2}, 31, 62)
	wantSeen := map[string]int{"/If/then/Loop/body/add_y2": 3, "/If/then/Loop/body/add_s": 3, "/If/then/Loop": 1, "/If": 1}
	if !reflect.DeepEqual(seen, wantSeen) {
		t.Fatalf("hook calls %v, want %v", seen, wantSeen)
	}
	runs := []int64{f.Subgraphs[0].Runs(), f.Subgraphs[1].Runs(), f.Subgraphs[2].Runs()}
	if !reflect.DeepEqual(runs, []int64{1, 3, 0}) {
		t.Fatalf("subgraph runs (then, body, else) %v, want [1 3 0]", runs)
	}
}
