package loader

import (
	"encoding/binary"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"testing"

	"google.golang.org/protobuf/proto"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader/onnxpb"
	"github.com/vitals-health/vitals/tensor"
)

// fuzzBudget bounds every allocation a fuzz input can ask for.
const fuzzBudget = 64 << 20

// seedModels builds small, valid ModelProtos that reach the decoder's
// branches: typed and raw data of each type, float16, a Constant node with
// a tensor attribute, a sparse initializer, a subgraph, external data.
func seedModels(t testing.TB) [][]byte {
	var out [][]byte
	add := func(b []byte, err error) {
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, b)
	}
	// a two-layer MLP
	b := modelbuild.New("mlp", 13)
	b.Input("x", []int{1, 4}, true)
	b.Init("w1", []int{4, 3}, []float32{1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12})
	b.Init("b1", []int{3}, []float32{0, 1, 2})
	b.Node("Gemm", "fc1", []string{"x", "w1", "b1"}, []string{"h"})
	b.Node("Relu", "relu1", []string{"h"}, []string{"y"})
	b.Output("y")
	add(b.Bytes())

	// every storage variant of one initializer, through the raw ModelProto
	base, err := b.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	variant := func(edit func(m *onnxpb.ModelProto)) {
		var m onnxpb.ModelProto
		if err := proto.Unmarshal(base, &m); err != nil {
			t.Fatal(err)
		}
		edit(&m)
		add(proto.Marshal(&m))
	}
	for _, tp := range seedTensors() {
		variant(func(m *onnxpb.ModelProto) {
			tp := proto.Clone(tp).(*onnxpb.TensorProto)
			tp.Name = proto.String("extra")
			m.Graph.Initializer = append(m.Graph.Initializer, tp)
		})
	}
	variant(func(m *onnxpb.ModelProto) { // Constant node with a tensor attribute
		m.Graph.Node = append(m.Graph.Node, &onnxpb.NodeProto{OpType: proto.String("Constant"), Output: []string{"c"},
			Attribute: []*onnxpb.AttributeProto{{Name: proto.String("value"), Type: onnxpb.AttributeProto_TENSOR.Enum(),
				T: &onnxpb.TensorProto{Dims: []int64{2}, DataType: proto.Int32(1), FloatData: []float32{1, 2}}}}})
	})
	variant(func(m *onnxpb.ModelProto) { // sparse initializer, 1-D and 2-D indices
		m.Graph.SparseInitializer = append(m.Graph.SparseInitializer,
			&onnxpb.SparseTensorProto{Dims: []int64{2, 3},
				Values:  &onnxpb.TensorProto{Name: proto.String("sp"), Dims: []int64{2}, DataType: proto.Int32(1), FloatData: []float32{5, 6}},
				Indices: &onnxpb.TensorProto{Dims: []int64{2}, DataType: proto.Int32(7), Int64Data: []int64{1, 5}}},
			&onnxpb.SparseTensorProto{Dims: []int64{2, 3},
				Values:  &onnxpb.TensorProto{Name: proto.String("sp2"), Dims: []int64{2}, DataType: proto.Int32(1), FloatData: []float32{5, 6}},
				Indices: &onnxpb.TensorProto{Dims: []int64{2, 2}, DataType: proto.Int32(7), Int64Data: []int64{0, 1, 1, 2}}})
	})
	variant(func(m *onnxpb.ModelProto) { // If with two subgraphs
		branch := func(name string) *onnxpb.GraphProto {
			return &onnxpb.GraphProto{Name: proto.String(name),
				Node:   []*onnxpb.NodeProto{{OpType: proto.String("Identity"), Input: []string{"y"}, Output: []string{name + "_out"}}},
				Output: []*onnxpb.ValueInfoProto{{Name: proto.String(name + "_out")}}}
		}
		m.Graph.Initializer = append(m.Graph.Initializer, &onnxpb.TensorProto{Name: proto.String("cond"), DataType: proto.Int32(9), Int32Data: []int32{1}})
		m.Graph.Node = append(m.Graph.Node, &onnxpb.NodeProto{OpType: proto.String("If"), Input: []string{"cond"}, Output: []string{"z"},
			Attribute: []*onnxpb.AttributeProto{
				{Name: proto.String("then_branch"), Type: onnxpb.AttributeProto_GRAPH.Enum(), G: branch("then")},
				{Name: proto.String("else_branch"), Type: onnxpb.AttributeProto_GRAPH.Enum(), G: branch("else")}}})
	})
	variant(func(m *onnxpb.ModelProto) { // external data in the fuzz folder
		m.Graph.Initializer = append(m.Graph.Initializer, externalTensor("ext", []int64{4, 2}, "w.bin", 0, 32))
	})
	return out
}

// externalTensor is a float32 initializer whose bytes live in location.
func externalTensor(name string, dims []int64, location string, offset, length int64) *onnxpb.TensorProto {
	tp := &onnxpb.TensorProto{Name: proto.String(name), Dims: dims, DataType: proto.Int32(1),
		DataLocation: onnxpb.TensorProto_EXTERNAL.Enum()}
	kv := func(k, v string) *onnxpb.StringStringEntryProto {
		return &onnxpb.StringStringEntryProto{Key: proto.String(k), Value: proto.String(v)}
	}
	tp.ExternalData = append(tp.ExternalData, kv("location", location))
	if offset >= 0 {
		tp.ExternalData = append(tp.ExternalData, kv("offset", fmt.Sprint(offset)))
	}
	if length >= 0 {
		tp.ExternalData = append(tp.ExternalData, kv("length", fmt.Sprint(length)))
	}
	return tp
}

// seedTensors are TensorProtos of every supported type, typed and raw.
func seedTensors() []*onnxpb.TensorProto {
	raw := func(dt tensor.DType, n int) []byte {
		b := make([]byte, n*dt.Size())
		for i := range b {
			b[i] = byte(i*7 + 1)
		}
		return b
	}
	f16 := make([]byte, 6)
	for i, h := range []uint16{0x3c00, 0x8001, 0x7c00} {
		binary.LittleEndian.PutUint16(f16[2*i:], h)
	}
	out := []*onnxpb.TensorProto{
		{Dims: []int64{2, 2}, DataType: proto.Int32(1), FloatData: []float32{1, -2, float32(math.Inf(1)), 0}},
		{Dims: []int64{2}, DataType: proto.Int32(11), DoubleData: []float64{1, 2}},
		{Dims: []int64{3}, DataType: proto.Int32(7), Int64Data: []int64{1, -1, 1 << 40}},
		{Dims: []int64{2}, DataType: proto.Int32(13), Uint64Data: []uint64{1, 2}},
		{Dims: []int64{2}, DataType: proto.Int32(12), Uint64Data: []uint64{1, 2}},
		{Dims: []int64{3}, DataType: proto.Int32(10), Int32Data: []int32{0x3c00, 0x8001, 0x7c00}},
		{Dims: []int64{3}, DataType: proto.Int32(16), Int32Data: []int32{0x3f80, 0, 0xff80}},
		{Dims: []int64{2}, DataType: proto.Int32(9), Int32Data: []int32{0, 1}},
		{Dims: []int64{2}, DataType: proto.Int32(3), Int32Data: []int32{-1, 1}},
		{Dims: []int64{1}, DataType: proto.Int32(8), StringData: [][]byte{[]byte("a")}},
		{Dims: []int64{3}, DataType: proto.Int32(10), RawData: f16},
		{Dims: []int64{0, 5}, DataType: proto.Int32(1), RawData: []byte{}},
		{DataType: proto.Int32(1), FloatData: []float32{3}}, // scalar
	}
	for _, dt := range []tensor.DType{tensor.Float32, tensor.Float64, tensor.Int64, tensor.Uint64, tensor.Int32, tensor.Uint32,
		tensor.Int16, tensor.Uint16, tensor.Int8, tensor.Uint8, tensor.Bool, tensor.BFloat16} {
		out = append(out, &onnxpb.TensorProto{Dims: []int64{3}, DataType: proto.Int32(int32(dt)), RawData: raw(dt, 3)})
	}
	return out
}

// fuzzDir is a folder with a 64-byte "w.bin" for external data, and a symbolic
// link "escape.bin" to a file outside it, which must never be read.
func fuzzDir(t testing.TB) string {
	dir := t.TempDir()
	inner := filepath.Join(dir, "model")
	if err := os.Mkdir(inner, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(inner, "w.bin"), make([]byte, 64), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "secret"), make([]byte, 64), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink(filepath.Join(dir, "secret"), filepath.Join(inner, "escape.bin")); err != nil {
		t.Fatal(err)
	}
	return inner
}

// consistent reports a decoded tensor whose data does not match its dtype and shape.
func consistent(t *testing.T, what string, x *tensor.Tensor) {
	if x == nil {
		return
	}
	if tensor.DTypeOf(x.Data) != x.DType || sliceLen(x.Data) != x.Size() {
		t.Fatalf("%s: tensor %v holds %T of %d elements", what, x, x.Data, sliceLen(x.Data))
	}
}

// FuzzDecodeModel: DecodeModel never panics, never allocates past the memory
// budget, and every tensor it returns holds data matching its dtype and shape.
func FuzzDecodeModel(f *testing.F) {
	for _, b := range seedModels(f) {
		f.Add(b)
	}
	// the project's own models (demo and reference), not third-party data
	for _, pattern := range []string{"../testdata/demo/*.onnx", "../testdata/ref/*.onnx"} {
		files, _ := filepath.Glob(pattern)
		for _, p := range files {
			b, err := os.ReadFile(p)
			if err != nil {
				f.Fatal(err)
			}
			f.Add(b)
		}
	}
	dir := fuzzDir(f)
	prev := tensor.SetMemoryBudget(fuzzBudget)
	f.Cleanup(func() { tensor.SetMemoryBudget(prev) })
	f.Fuzz(func(t *testing.T, b []byte) {
		m, err := DecodeModel(b, dir)
		if err != nil {
			return
		}
		var walk func(g *Graph)
		walk = func(g *Graph) {
			for name, x := range g.Initializers {
				consistent(t, "initializer "+name, x)
			}
			for _, n := range g.Nodes {
				for _, a := range n.Attrs {
					consistent(t, "attribute "+a.Name, a.T)
					for _, x := range a.Tensors {
						consistent(t, "attribute "+a.Name, x)
					}
					if a.G != nil {
						walk(a.G)
					}
					for _, sg := range a.Graphs {
						walk(sg)
					}
				}
			}
		}
		walk(m.Graph)
	})
}

// FuzzDecodeTensor: DecodeTensor never panics and what it returns is consistent.
func FuzzDecodeTensor(f *testing.F) {
	for _, tp := range seedTensors() {
		b, err := proto.Marshal(tp)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	prev := tensor.SetMemoryBudget(fuzzBudget)
	f.Cleanup(func() { tensor.SetMemoryBudget(prev) })
	f.Fuzz(func(t *testing.T, b []byte) {
		x, err := DecodeTensor(b)
		if err != nil {
			return
		}
		consistent(t, "tensor", x)
	})
}
