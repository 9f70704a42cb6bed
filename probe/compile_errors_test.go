package probe_test

import (
	"strings"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

func compileBuilt(t *testing.T, b *modelbuild.Builder) (*loader.Model, *probe.Plan, error) {
	t.Helper()
	m := probe.BuiltModel(t, b)
	p, err := probe.Compile(m)
	return m, p, err
}

// A cycle, a dangling input and unsupported operators are compile errors that name the nodes.
func TestCompileErrorsNameNodes(t *testing.T) {
	b := modelbuild.New("cycle", 13)
	b.Input("x", []int{1, 2}, true)
	b.Node("Add", "left", []string{"x", "r"}, []string{"l"})
	b.Node("Relu", "right", []string{"l"}, []string{"r"})
	b.Output("r")
	if _, _, err := compileBuilt(t, b); err == nil || !strings.Contains(err.Error(), "cycle") || !strings.Contains(err.Error(), `"left"`) {
		t.Errorf("cycle: %v", err)
	}
	b = modelbuild.New("dangling", 13)
	b.Input("x", []int{1, 2}, true)
	b.Node("Add", "adder", []string{"x", "ghost"}, []string{"y"})
	b.Output("y")
	if _, _, err := compileBuilt(t, b); err == nil || !strings.Contains(err.Error(), `"adder"`) || !strings.Contains(err.Error(), `"ghost"`) {
		t.Errorf("dangling input: %v", err)
	}
	b = modelbuild.New("unsupported", 13)
	b.Input("x", []int{1, 2}, true)
	b.Node("Frobnicate", "f1", []string{"x"}, []string{"y"})
	b.Node("Frobnicate", "f2", []string{"y"}, []string{"z"})
	b.Node("Twiddle", "t1", []string{"z"}, []string{"w"})
	b.Output("w")
	_, _, err := compileBuilt(t, b)
	// one line per operator type with the count and the first node (issue 17)
	if err == nil || !strings.Contains(err.Error(), `Frobnicate (domain ai.onnx, opset 13): 2 nodes, first "f1"`) ||
		!strings.Contains(err.Error(), `Twiddle (domain ai.onnx, opset 13): 1 node "t1"`) || strings.Count(err.Error(), "\n") != 2 {
		t.Errorf("unsupported operators must be listed once per type: %v", err)
	}
}

// Inputs of the wrong rank, size or type, and kernels failing on bad shapes,
// give errors naming the input or the node.
func TestRunErrorsNameInputsAndNodes(t *testing.T) {
	b := modelbuild.New("mm", 13)
	b.Input("x", []int{1, 3}, true)
	b.Init("W", []int{4, 2}, make([]float32, 8))
	b.Node("MatMul", "project", []string{"x", "W"}, []string{"y"})
	b.Output("y")
	_, p, err := compileBuilt(t, b)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := p.Run(map[string]*tensor.Tensor{"x": tensor.New(tensor.Float32, []int{2, 3, 1})}, nil); err == nil || !strings.Contains(err.Error(), `input "x"`) {
		t.Errorf("wrong rank: %v", err)
	}
	if _, err := p.Run(map[string]*tensor.Tensor{"x": tensor.New(tensor.Int64, []int{2, 3})}, nil); err == nil || !strings.Contains(err.Error(), "float32") {
		t.Errorf("wrong type: %v", err)
	}
	// the declared shape allows 3 features; the weight wants 4: the kernel reports it, naming the node
	if _, err := p.Run(map[string]*tensor.Tensor{"x": tensor.New(tensor.Float32, []int{5, 3})}, nil); err == nil || !strings.Contains(err.Error(), `node "project" (MatMul)`) {
		t.Errorf("shape mismatch in a kernel: %v", err)
	}
	// symbolic batch: any batch size runs, and the hook sees every node
	var seen []string
	b = modelbuild.New("ok", 13)
	b.Input("x", []int{1, 4}, true)
	b.Init("W", []int{4, 2}, make([]float32, 8))
	b.Node("MatMul", "project", []string{"x", "W"}, []string{"h"})
	b.Node("Relu", "act", []string{"h"}, []string{"y"})
	b.Output("y")
	_, p, err = compileBuilt(t, b)
	if err != nil {
		t.Fatal(err)
	}
	for _, n := range []int{1, 7} {
		seen = seen[:0]
		out, err := p.Run(map[string]*tensor.Tensor{"x": tensor.New(tensor.Float32, []int{n, 4})}, func(nd *loader.Node, outs []*tensor.Tensor) error {
			seen = append(seen, nd.Name)
			return nil
		})
		if err != nil || out["y"].Shape[0] != n || strings.Join(seen, ",") != "project,act" {
			t.Fatalf("batch %d: %v %v %v", n, out, seen, err)
		}
	}
}
