// Package loader reads ONNX model files into a plain Go graph and reads
// sample data (NumPy .npy/.npz, ONNX TensorProto .pb, images, CSV) into tensors.
package loader

import (
	"github.com/vitals-health/vitals/tensor"
)

// Model is a decoded ONNX ModelProto.
type Model struct {
	Path            string
	IRVersion       int64
	Producer        string
	ProducerVersion string
	Domain          string
	ModelVersion    int64
	DocString       string
	Metadata        map[string]string
	// Opsets maps an operator-set domain ("" is the default ai.onnx domain) to its version.
	Opsets map[string]int64
	Graph  *Graph
}

// Graph is a decoded GraphProto.
type Graph struct {
	Name         string
	Nodes        []*Node
	Initializers map[string]*tensor.Tensor
	// InitOrder lists initializer names in file order.
	InitOrder []string
	// Inputs are the graph inputs that are not initializers (the data the model is fed).
	Inputs []ValueInfo
	// DefaultInputs are graph inputs that also have an initializer (old opsets): overridable defaults.
	DefaultInputs []ValueInfo
	Outputs       []ValueInfo
	// ValueInfo holds declared types of intermediate values, by name.
	ValueInfo map[string]ValueInfo
	// Half names the initializers stored as float16 or bfloat16 in the file
	// (held widened to float32 in Initializers), with their stored type.
	Half map[string]tensor.DType
}

// ValueInfo is a named, typed value; Shape dims are -1 when unknown, with Symbols naming symbolic dims.
type ValueInfo struct {
	Name    string
	DType   tensor.DType
	Shape   []int
	Symbols []string // "" for fixed dims; symbolic name (e.g. "batch") otherwise
	HasType bool     // a tensor type was declared
	Kind    string   // "tensor", "sequence", "map", "optional" or ""
}

// Node is one operator invocation.
type Node struct {
	Name    string
	OpType  string
	Domain  string
	Inputs  []string // "" marks an omitted optional input
	Outputs []string
	Attrs   map[string]*Attr
}

// AttrKind mirrors AttributeProto.AttributeType.
type AttrKind int32

// Attribute kinds (ONNX numbering).
const (
	AttrUndefined AttrKind = iota
	AttrFloat
	AttrInt
	AttrString
	AttrTensor
	AttrGraph
	AttrFloats
	AttrInts
	AttrStrings
	AttrTensors
	AttrGraphs
	AttrSparseTensor
	AttrSparseTensors
	AttrTypeProto
	AttrTypeProtos
)

// Attr is one attribute value; the field that matches Kind is set.
type Attr struct {
	Name    string
	Kind    AttrKind
	F       float32
	I       int64
	S       string
	T       *tensor.Tensor
	G       *Graph
	Floats  []float32
	Ints    []int64
	Strings []string
	Tensors []*tensor.Tensor
	Graphs  []*Graph
	// RefAttr is set for attributes inside functions that refer to a caller attribute.
	RefAttr string
}

// Label is a human name for a node: its name, or "op#index" style fallback set by the loader.
func (n *Node) Label() string { return n.Name }
