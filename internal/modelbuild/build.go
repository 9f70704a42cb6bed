// Package modelbuild writes small ONNX models from Go, for tests and fixtures:
// a graph of nodes with float32 initializers, serialized as a ModelProto.
package modelbuild

import (
	"os"

	"google.golang.org/protobuf/proto"

	"github.com/vitals-health/vitals/loader/onnxpb"
)

// Builder accumulates one graph.
type Builder struct {
	g     *onnxpb.GraphProto
	opset int64
}

// New starts a model with the given default-domain opset.
func New(name string, opset int64) *Builder {
	return &Builder{g: &onnxpb.GraphProto{Name: proto.String(name)}, opset: opset}
}

func dims(shape []int) []int64 {
	d := make([]int64, len(shape))
	for i, v := range shape {
		d[i] = int64(v)
	}
	return d
}

func valueInfo(name string, elem int32, shape []int, symbolic map[int]string) *onnxpb.ValueInfoProto {
	var ds []*onnxpb.TensorShapeProto_Dimension
	for i, v := range shape {
		if s, ok := symbolic[i]; ok {
			ds = append(ds, &onnxpb.TensorShapeProto_Dimension{Value: &onnxpb.TensorShapeProto_Dimension_DimParam{DimParam: s}})
		} else {
			ds = append(ds, &onnxpb.TensorShapeProto_Dimension{Value: &onnxpb.TensorShapeProto_Dimension_DimValue{DimValue: int64(v)}})
		}
	}
	return &onnxpb.ValueInfoProto{Name: proto.String(name), Type: &onnxpb.TypeProto{Value: &onnxpb.TypeProto_TensorType{
		TensorType: &onnxpb.TypeProto_Tensor{ElemType: proto.Int32(elem), Shape: &onnxpb.TensorShapeProto{Dim: ds}}}}}
}

// Input declares a float32 graph input; dim 0 is symbolic "batch" when batchDim is true.
func (b *Builder) Input(name string, shape []int, batchDim bool) {
	sym := map[int]string{}
	if batchDim {
		sym[0] = "batch"
	}
	b.g.Input = append(b.g.Input, valueInfo(name, 1, shape, sym))
}

// InputOf declares a graph input of ONNX element type elem (1 float32,
// 7 int64, ...) whose dimensions in symbolic are named (e.g. {1: "batch"}
// for [2, batch, 128]); the other dimensions are shape's.
func (b *Builder) InputOf(name string, elem int32, shape []int, symbolic map[int]string) {
	b.g.Input = append(b.g.Input, valueInfo(name, elem, shape, symbolic))
}

// Output declares a float32 graph output of unknown shape.
func (b *Builder) Output(name string) {
	b.g.Output = append(b.g.Output, &onnxpb.ValueInfoProto{Name: proto.String(name), Type: &onnxpb.TypeProto{Value: &onnxpb.TypeProto_TensorType{
		TensorType: &onnxpb.TypeProto_Tensor{ElemType: proto.Int32(1)}}}})
}

// Init adds a float32 initializer.
func (b *Builder) Init(name string, shape []int, data []float32) {
	b.g.Initializer = append(b.g.Initializer, &onnxpb.TensorProto{Name: proto.String(name), Dims: dims(shape),
		DataType: proto.Int32(1), FloatData: data})
}

// Attr is a node attribute: int64, float32, []int64 or []float32 value.
type Attr struct {
	Name  string
	Value any
}

// Node adds a node and returns its first output name.
func (b *Builder) Node(op, name string, inputs, outputs []string, attrs ...Attr) string {
	np := &onnxpb.NodeProto{OpType: proto.String(op), Name: proto.String(name), Input: inputs, Output: outputs}
	for _, a := range attrs {
		ap := &onnxpb.AttributeProto{Name: proto.String(a.Name)}
		switch v := a.Value.(type) {
		case int:
			ap.Type, ap.I = onnxpb.AttributeProto_INT.Enum(), proto.Int64(int64(v))
		case int64:
			ap.Type, ap.I = onnxpb.AttributeProto_INT.Enum(), proto.Int64(v)
		case float32:
			ap.Type, ap.F = onnxpb.AttributeProto_FLOAT.Enum(), proto.Float32(v)
		case []int64:
			ap.Type, ap.Ints = onnxpb.AttributeProto_INTS.Enum(), v
		case []float32:
			ap.Type, ap.Floats = onnxpb.AttributeProto_FLOATS.Enum(), v
		case string:
			ap.Type, ap.S = onnxpb.AttributeProto_STRING.Enum(), []byte(v)
		}
		np.Attribute = append(np.Attribute, ap)
	}
	b.g.Node = append(b.g.Node, np)
	return outputs[0]
}

// Bytes serializes the model.
func (b *Builder) Bytes() ([]byte, error) {
	m := &onnxpb.ModelProto{IrVersion: proto.Int64(8), ProducerName: proto.String("vitals-modelbuild"),
		OpsetImport: []*onnxpb.OperatorSetIdProto{{Domain: proto.String(""), Version: proto.Int64(b.opset)}}, Graph: b.g}
	return proto.Marshal(m)
}

// Write serializes the model to path.
func (b *Builder) Write(path string) error {
	data, err := b.Bytes()
	if err != nil {
		return err
	}
	return os.WriteFile(path, data, 0o644)
}
