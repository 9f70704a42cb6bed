package probe

import (
	"strings"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// graphModel wraps nodes into a model with one float32 input "x" of free shape.
func graphModel(inits map[string]*tensor.Tensor, outputs []string, nodes ...*loader.Node) *loader.Model {
	g := &loader.Graph{Name: "g", Initializers: inits, ValueInfo: map[string]loader.ValueInfo{},
		Inputs: []loader.ValueInfo{{Name: "x", DType: tensor.Float32, HasType: true, Kind: "tensor"}}}
	for name := range inits {
		g.InitOrder = append(g.InitOrder, name)
	}
	for _, o := range outputs {
		g.Outputs = append(g.Outputs, loader.ValueInfo{Name: o})
	}
	for _, n := range nodes {
		if n.Attrs == nil {
			n.Attrs = map[string]*loader.Attr{}
		}
	}
	g.Nodes = nodes
	return &loader.Model{Opsets: map[string]int64{"": 17}, Graph: g}
}

// At run time an output over the memory budget is an error naming the node
// and the bytes, refused before allocation: through tensor.New
// (ConstantOfShape, Expand), makeChecked (MatMul, Range) or a shape check (Resize).
func TestRunMemoryBudget(t *testing.T) {
	prev := tensor.SetMemoryBudget(1 << 20) // 1 MiB
	defer tensor.SetMemoryBudget(prev)
	for _, c := range []struct {
		name  string
		model *loader.Model
		bytes string
	}{
		{"ConstantOfShape", graphModel(map[string]*tensor.Tensor{"shape": tensor.From([]int64{1 << 20, 1 << 20}, 2)}, []string{"y"},
			&loader.Node{Name: "bomb", OpType: "ConstantOfShape", Inputs: []string{"shape"}, Outputs: []string{"y"}}), "4398046511104 bytes"},
		{"Expand", graphModel(map[string]*tensor.Tensor{"shape": tensor.From([]int64{1024, 4096}, 2)}, []string{"y"},
			&loader.Node{Name: "bomb", OpType: "Expand", Inputs: []string{"x", "shape"}, Outputs: []string{"y"}}), "16777216 bytes"},
		{"MatMul", graphModel(map[string]*tensor.Tensor{"w": tensor.New(tensor.Float32, []int{1, 1024})}, []string{"y"},
			&loader.Node{Name: "bomb", OpType: "MatMul", Inputs: []string{"x", "w"}, Outputs: []string{"y"}}), "4194304 bytes"},
		// Range's length comes from values in the file: 10^12 elements would
		// end the process (Go cannot recover from running out of memory)
		{"Range", graphModel(map[string]*tensor.Tensor{"s": tensor.From([]int64{0}), "l": tensor.From([]int64{1_000_000_000_000}), "d": tensor.From([]int64{1})}, []string{"y"},
			&loader.Node{Name: "bomb", OpType: "Range", Inputs: []string{"s", "l", "d"}, Outputs: []string{"y"}}), "8000000000000 bytes"},
		{"Resize", graphModel(map[string]*tensor.Tensor{"roi": tensor.From([]float32{}, 0), "scales": tensor.From([]float32{1, 1000}, 2)}, []string{"y"},
			&loader.Node{Name: "bomb", OpType: "Resize", Inputs: []string{"x", "roi", "scales"}, Outputs: []string{"y"}}), "4096000 bytes"},
	} {
		t.Run(c.name, func(t *testing.T) {
			p, err := Compile(c.model)
			if err != nil {
				t.Fatal(err)
			}
			x := tensor.New(tensor.Float32, []int{1024, 1})
			_, err = p.Run(map[string]*tensor.Tensor{"x": x}, nil)
			if err == nil {
				t.Fatal("ran past the budget")
			}
			msg := err.Error()
			if !strings.Contains(msg, `node "bomb"`) || !strings.Contains(msg, c.bytes) || !strings.Contains(msg, "memory budget") || strings.Contains(msg, "internal error") {
				t.Errorf("error %q: want the node, %s and the budget", msg, c.bytes)
			}
		})
	}
	// under the budget the same graph runs
	tensor.SetMemoryBudget(64 << 20)
	p, err := Compile(graphModel(map[string]*tensor.Tensor{"w": tensor.New(tensor.Float32, []int{1, 1024})}, []string{"y"},
		&loader.Node{Name: "ok", OpType: "MatMul", Inputs: []string{"x", "w"}, Outputs: []string{"y"}}))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := p.Run(map[string]*tensor.Tensor{"x": tensor.New(tensor.Float32, []int{1024, 1})}, nil); err != nil {
		t.Errorf("4 MiB output under a 64 MiB budget: %v", err)
	}
}

// A kernel panic becomes an error naming the node (and, with Debug, the stack).
func TestKernelPanicBecomesError(t *testing.T) {
	Register("vitals.test", "Boom", 1, func(c *Call) error { panic("kaboom") })
	m := graphModel(nil, []string{"y"}, &loader.Node{Name: "fuse", OpType: "Boom", Domain: "vitals.test", Inputs: []string{"x"}, Outputs: []string{"y"}})
	m.Opsets["vitals.test"] = 1
	p, err := Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	x := tensor.New(tensor.Float32, []int{1})
	_, err = p.Run(map[string]*tensor.Tensor{"x": x}, nil)
	if err == nil || !strings.Contains(err.Error(), `node "fuse" (Boom)`) || !strings.Contains(err.Error(), "kaboom") || strings.Contains(err.Error(), "goroutine") {
		t.Errorf("panic: %v", err)
	}
	p.Debug = true
	_, err = p.Run(map[string]*tensor.Tensor{"x": x}, nil)
	if err == nil || !strings.Contains(err.Error(), "goroutine") {
		t.Errorf("panic with Debug: want a stack, got %v", err)
	}
}

// Found by FuzzGraph: Gemm whose output is empty with an empty C panicked in expandInto.
func TestGemmEmptyOutputWithC(t *testing.T) {
	m := graphModel(nil, []string{"y"}, &loader.Node{Name: "g", OpType: "Gemm", Inputs: []string{"x", "x", "x"}, Outputs: []string{"y"},
		Attrs: map[string]*loader.Attr{"transA": {Name: "transA", Kind: loader.AttrInt, I: 1}}})
	p, err := Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	out, err := p.Run(map[string]*tensor.Tensor{"x": tensor.From([]float32{}, 1, 0)}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if y := out["y"]; !tensor.SameShape(y.Shape, []int{0, 0}) {
		t.Errorf("shape %v, want [0 0]", y.Shape)
	}
}
