// Command genbig writes a large MLP whose weights live in an external data
// file beside the model, for memory measurements (scripts/measure-memory.sh):
//
//	go run ./scripts/genbig -out DIR [-width 4096] [-layers 6]
//
// DIR/big.onnx holds the graph (Gemm + Relu per layer, input "x" of shape
// [batch, width]); DIR/big.weights.bin holds every weight and bias as raw
// little-endian float32, referenced by ONNX external_data entries
// (location, offset, length). Weights are He-scaled Gaussians from a fixed seed.
package main

import (
	"bufio"
	"encoding/binary"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"google.golang.org/protobuf/proto"

	"github.com/vitals-health/vitals/loader/onnxpb"
)

func main() {
	out := flag.String("out", "", "output folder")
	width := flag.Int("width", 4096, "units per layer")
	layers := flag.Int("layers", 6, "number of Gemm+Relu layers")
	flag.Parse()
	if *out == "" || *width <= 0 || *layers <= 0 {
		fmt.Fprintln(os.Stderr, "usage: genbig -out DIR [-width N] [-layers L]")
		os.Exit(2)
	}
	if err := write(*out, *width, *layers); err != nil {
		fmt.Fprintln(os.Stderr, "genbig:", err)
		os.Exit(1)
	}
}

func write(dir string, width, layers int) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	const binName = "big.weights.bin"
	f, err := os.Create(filepath.Join(dir, binName))
	if err != nil {
		return err
	}
	defer f.Close()
	w := bufio.NewWriterSize(f, 1<<20)
	rng := rand.New(rand.NewPCG(1, 2))
	var offset int64
	// external writes n float32 values and returns the TensorProto pointing at them.
	external := func(name string, dims []int64, n int, gen func() float32) (*onnxpb.TensorProto, error) {
		var b [4]byte
		for range n {
			binary.LittleEndian.PutUint32(b[:], math.Float32bits(gen()))
			if _, err := w.Write(b[:]); err != nil {
				return nil, err
			}
		}
		kv := func(k, v string) *onnxpb.StringStringEntryProto {
			return &onnxpb.StringStringEntryProto{Key: proto.String(k), Value: proto.String(v)}
		}
		tp := &onnxpb.TensorProto{Name: proto.String(name), Dims: dims, DataType: proto.Int32(1),
			DataLocation: onnxpb.TensorProto_EXTERNAL.Enum(),
			ExternalData: []*onnxpb.StringStringEntryProto{kv("location", binName), kv("offset", fmt.Sprint(offset)), kv("length", fmt.Sprint(4*n))}}
		offset += int64(4 * n)
		return tp, nil
	}
	g := &onnxpb.GraphProto{Name: proto.String("big_mlp")}
	dim := func(v int64) *onnxpb.TensorShapeProto_Dimension {
		return &onnxpb.TensorShapeProto_Dimension{Value: &onnxpb.TensorShapeProto_Dimension_DimValue{DimValue: v}}
	}
	batch := &onnxpb.TensorShapeProto_Dimension{Value: &onnxpb.TensorShapeProto_Dimension_DimParam{DimParam: "batch"}}
	g.Input = []*onnxpb.ValueInfoProto{{Name: proto.String("x"), Type: &onnxpb.TypeProto{Value: &onnxpb.TypeProto_TensorType{
		TensorType: &onnxpb.TypeProto_Tensor{ElemType: proto.Int32(1), Shape: &onnxpb.TensorShapeProto{Dim: []*onnxpb.TensorShapeProto_Dimension{batch, dim(int64(width))}}}}}}}
	prev := "x"
	scale := math.Sqrt(2 / float64(width))
	for l := range layers {
		wt, err := external(fmt.Sprintf("fc%d.weight", l), []int64{int64(width), int64(width)}, width*width,
			func() float32 { return float32(rng.NormFloat64() * scale) })
		if err != nil {
			return err
		}
		bt, err := external(fmt.Sprintf("fc%d.bias", l), []int64{int64(width)}, width, func() float32 { return 0.01 })
		if err != nil {
			return err
		}
		g.Initializer = append(g.Initializer, wt, bt)
		h, y := fmt.Sprintf("h%d", l), fmt.Sprintf("y%d", l)
		g.Node = append(g.Node,
			&onnxpb.NodeProto{Name: proto.String(fmt.Sprintf("fc%d", l)), OpType: proto.String("Gemm"), Input: []string{prev, wt.GetName(), bt.GetName()}, Output: []string{h}},
			&onnxpb.NodeProto{Name: proto.String(fmt.Sprintf("relu%d", l)), OpType: proto.String("Relu"), Input: []string{h}, Output: []string{y}})
		prev = y
	}
	g.Output = []*onnxpb.ValueInfoProto{{Name: proto.String(prev), Type: &onnxpb.TypeProto{Value: &onnxpb.TypeProto_TensorType{
		TensorType: &onnxpb.TypeProto_Tensor{ElemType: proto.Int32(1)}}}}}
	if err := w.Flush(); err != nil {
		return err
	}
	m := &onnxpb.ModelProto{IrVersion: proto.Int64(8), ProducerName: proto.String("vitals-genbig"),
		OpsetImport: []*onnxpb.OperatorSetIdProto{{Domain: proto.String(""), Version: proto.Int64(13)}}, Graph: g}
	b, err := proto.Marshal(m)
	if err != nil {
		return err
	}
	return os.WriteFile(filepath.Join(dir, "big.onnx"), b, 0o644)
}
