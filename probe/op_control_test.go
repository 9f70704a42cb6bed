package probe

import (
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// Control flow with subgraphs built by hand (only Add is needed): outer-scope
// reads, loop-carried values, scan outputs and reversed scan directions.

func ctlTestGraph(name string, inputs, outputs []string, nodes ...*loader.Node) *loader.Graph {
	g := &loader.Graph{Name: name, Initializers: map[string]*tensor.Tensor{}, Nodes: nodes}
	for _, in := range inputs {
		g.Inputs = append(g.Inputs, loader.ValueInfo{Name: in})
	}
	for _, o := range outputs {
		g.Outputs = append(g.Outputs, loader.ValueInfo{Name: o, DType: tensor.Float32})
	}
	return g
}

func ctlAdd(a, b, out string) *loader.Node {
	return &loader.Node{Name: "add_" + out, OpType: "Add", Inputs: []string{a, b}, Outputs: []string{out}, Attrs: map[string]*loader.Attr{}}
}

func ctlRun(t *testing.T, opset int64, node *loader.Node, ins map[string]*tensor.Tensor, outs ...string) map[string]*tensor.Tensor {
	t.Helper()
	g := ctlTestGraph("main", nil, outs, node)
	for name := range ins {
		g.Inputs = append(g.Inputs, loader.ValueInfo{Name: name})
	}
	p, err := Compile(&loader.Model{Opsets: map[string]int64{"": opset}, Graph: g})
	if err != nil {
		t.Fatal(err)
	}
	res, err := p.Run(ins, nil)
	if err != nil {
		t.Fatal(err)
	}
	return res
}

func ctlWant(t *testing.T, got *tensor.Tensor, shape []int, want ...float32) {
	t.Helper()
	if !tensor.SameShape(got.Shape, shape) {
		t.Fatalf("shape %v, want %v", got.Shape, shape)
	}
	for i, w := range want {
		if got.F32()[i] != w {
			t.Fatalf("got %v, want %v", got.F32(), want)
		}
	}
}

func TestLoopCarriedAndScanOutputs(t *testing.T) {
	// body(i, cond, y): y' = y + step (step from the outer scope); scan out = y' + y'
	body := ctlTestGraph("body", []string{"i", "cond", "y"}, []string{"cond", "y2", "s"},
		ctlAdd("y", "step", "y2"), ctlAdd("y2", "y2", "s"))
	node := &loader.Node{Name: "loop", OpType: "Loop", Inputs: []string{"M", "", "y0"}, Outputs: []string{"yf", "scan"},
		Attrs: map[string]*loader.Attr{"body": {Name: "body", Kind: loader.AttrGraph, G: body}}}
	res := ctlRun(t, 13, node, map[string]*tensor.Tensor{
		"M": tensor.From([]int64{3}), "y0": tensor.From([]float32{1, 2}, 2), "step": tensor.From([]float32{10, 20}, 2),
	}, "yf", "scan")
	ctlWant(t, res["yf"], []int{2}, 31, 62)
	ctlWant(t, res["scan"], []int{3, 2}, 22, 44, 42, 84, 62, 124)

	res = ctlRun(t, 13, node, map[string]*tensor.Tensor{
		"M": tensor.From([]int64{0}), "y0": tensor.From([]float32{1, 2}, 2), "step": tensor.From([]float32{10, 20}, 2),
	}, "yf", "scan")
	ctlWant(t, res["yf"], []int{2}, 1, 2)
	if res["scan"].Shape[0] != 0 {
		t.Fatalf("zero-trip scan output has shape %v", res["scan"].Shape)
	}
}

func TestScanAxesAndDirections(t *testing.T) {
	// body(acc, x): acc' = acc + x; out = acc'
	body := ctlTestGraph("body", []string{"acc", "x"}, []string{"acc2", "out"},
		ctlAdd("acc", "x", "acc2"), ctlAdd("acc", "x", "out"))
	attrs := map[string]*loader.Attr{
		"body":                   {Name: "body", Kind: loader.AttrGraph, G: body},
		"num_scan_inputs":        {Kind: loader.AttrInt, I: 1},
		"scan_input_axes":        {Kind: loader.AttrInts, Ints: []int64{1}},
		"scan_input_directions":  {Kind: loader.AttrInts, Ints: []int64{1}},
		"scan_output_axes":       {Kind: loader.AttrInts, Ints: []int64{-1}},
		"scan_output_directions": {Kind: loader.AttrInts, Ints: []int64{0}},
	}
	node := &loader.Node{Name: "scan", OpType: "Scan", Inputs: []string{"a0", "x"}, Outputs: []string{"af", "outs"}, Attrs: attrs}
	// x is [2, 3]: scanned along axis 1 from the end
	res := ctlRun(t, 11, node, map[string]*tensor.Tensor{
		"a0": tensor.From([]float32{0, 0}, 2), "x": tensor.From([]float32{1, 2, 3, 4, 5, 6}, 2, 3),
	}, "af", "outs")
	ctlWant(t, res["af"], []int{2}, 6, 15)
	// steps take columns 3,2,1: acc = [3,6], [5,11], [6,15]; stacked along the last axis
	ctlWant(t, res["outs"], []int{2, 3}, 3, 5, 6, 6, 11, 15)
}

func TestIfReadsOuterScope(t *testing.T) {
	then := ctlTestGraph("then", nil, []string{"s"}, ctlAdd("a", "b", "s"))
	els := ctlTestGraph("else", nil, []string{"a"})
	node := &loader.Node{Name: "if", OpType: "If", Inputs: []string{"c"}, Outputs: []string{"r"},
		Attrs: map[string]*loader.Attr{"then_branch": {Kind: loader.AttrGraph, G: then}, "else_branch": {Kind: loader.AttrGraph, G: els}}}
	for _, cond := range []bool{true, false} {
		res := ctlRun(t, 13, node, map[string]*tensor.Tensor{
			"c": tensor.From([]bool{cond}), "a": tensor.From([]float32{1}, 1), "b": tensor.From([]float32{2}, 1),
		}, "r")
		want := float32(1)
		if cond {
			want = 3
		}
		ctlWant(t, res["r"], []int{1}, want)
	}
}
