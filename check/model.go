package check

import (
	"fmt"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// Model is a loaded and compiled ONNX model, ready to be checked.
//
// A Model is read-only while it runs (kernels keep no state in the plan;
// each run has its own collector and arena), so runs side by side or one
// after another may share one: TestConcurrentRunsMatchSolo shares each model
// between two concurrent runs under the race detector.
type Model struct {
	model *loader.Model
	plan  *probe.Plan
}

// LoadOptions say how a model is loaded.
type LoadOptions struct {
	// MemoryBudget caps, in bytes, each initializer and their sum (0: none);
	// use the same value as Options.MemoryBudget.
	MemoryBudget int64
	// Debug keeps Go stack traces in the errors of kernels that panic.
	Debug bool
}

// Load reads the ONNX model at path (external data next to it), checks its
// initializers against the memory budget and compiles it; every operator
// without a kernel is listed in one error.
func Load(path string, o LoadOptions) (*Model, error) {
	m, err := loader.LoadModelIn(path, &tensor.Arena{Budget: o.MemoryBudget})
	if err != nil {
		return nil, err
	}
	return Compile(m, o)
}

// Compile prepares a model already decoded (loader.DecodeModel, or built in
// memory) for checking; o.MemoryBudget is not applied to its initializers,
// which exist already.
func Compile(m *loader.Model, o LoadOptions) (*Model, error) {
	p, err := probe.Compile(m)
	if err != nil {
		return nil, fmt.Errorf("compiling model %q: %w", m.Path, err)
	}
	p.Debug = o.Debug
	return &Model{model: m, plan: p}, nil
}

// Path is the file the model was loaded from.
func (m *Model) Path() string { return m.model.Path }

// Inputs are the model's graph inputs (name, element type, declared shape;
// a symbolic dimension is −1).
func (m *Model) Inputs() []loader.ValueInfo { return m.model.Graph.Inputs }

// Outputs are the model's graph outputs.
func (m *Model) Outputs() []loader.ValueInfo { return m.model.Graph.Outputs }

// WeightBytes is the storage of the model's initializers, subgraphs
// included: what stays in memory for the whole run (the CLI sizes the
// garbage collector's target from it).
func (m *Model) WeightBytes() int64 {
	var w int64
	var walk func(g *loader.Graph)
	walk = func(g *loader.Graph) {
		for _, t := range g.Initializers {
			w += tensor.Bytes(t.DType, t.Size())
		}
		for _, n := range g.Nodes {
			for _, a := range n.Attrs {
				if a.G != nil {
					walk(a.G)
				}
				for _, sg := range a.Graphs {
					walk(sg)
				}
			}
		}
	}
	walk(m.model.Graph)
	return w
}

func (m *Model) graph() *loader.Graph { return m.model.Graph }
