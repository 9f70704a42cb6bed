package loader

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"google.golang.org/protobuf/proto"

	"github.com/vitals-health/vitals/loader/onnxpb"
)

func modelWith(init ...*onnxpb.TensorProto) []byte {
	g := &onnxpb.GraphProto{Name: proto.String("g"), Initializer: init,
		Node:   []*onnxpb.NodeProto{{OpType: proto.String("Identity"), Input: []string{"w"}, Output: []string{"y"}}},
		Output: []*onnxpb.ValueInfoProto{{Name: proto.String("y")}}}
	b, _ := proto.Marshal(&onnxpb.ModelProto{IrVersion: proto.Int64(8), Graph: g,
		OpsetImport: []*onnxpb.OperatorSetIdProto{{Version: proto.Int64(13)}}})
	return b
}

// Each kind of broken model gives an error that names what is wrong, never a panic.
func TestBadModelInputs(t *testing.T) {
	dir := t.TempDir()
	good := modelWith(&onnxpb.TensorProto{Name: proto.String("w"), Dims: []int64{2}, DataType: proto.Int32(1), FloatData: []float32{1, 2}})
	os.WriteFile(filepath.Join(dir, "blob.bin"), make([]byte, 16), 0o644)
	ext := func(loc, off, length string) *onnxpb.TensorProto {
		kv := []*onnxpb.StringStringEntryProto{{Key: proto.String("location"), Value: proto.String(loc)}}
		if off != "" {
			kv = append(kv, &onnxpb.StringStringEntryProto{Key: proto.String("offset"), Value: proto.String(off)})
		}
		if length != "" {
			kv = append(kv, &onnxpb.StringStringEntryProto{Key: proto.String("length"), Value: proto.String(length)})
		}
		return &onnxpb.TensorProto{Name: proto.String("w"), Dims: []int64{2}, DataType: proto.Int32(1),
			DataLocation: onnxpb.TensorProto_EXTERNAL.Enum(), ExternalData: kv}
	}
	cases := []struct {
		name string
		data []byte
		want string
	}{
		{"not a protobuf", []byte("GIF89a this is a picture, not a model"), "protobuf"},
		{"truncated", good[:len(good)-5], "protobuf"},
		{"empty graph", func() []byte {
			b, _ := proto.Marshal(&onnxpb.ModelProto{IrVersion: proto.Int64(8), Graph: &onnxpb.GraphProto{}})
			return b
		}(), "empty"},
		{"no graph", func() []byte { b, _ := proto.Marshal(&onnxpb.ModelProto{IrVersion: proto.Int64(8)}); return b }(), "no graph"},
		{"unknown data type", modelWith(&onnxpb.TensorProto{Name: proto.String("w"), Dims: []int64{1}, DataType: proto.Int32(99), RawData: []byte{0}}), `initializer "w": unsupported data type`},
		{"byte length vs shape", modelWith(&onnxpb.TensorProto{Name: proto.String("w"), Dims: []int64{3}, DataType: proto.Int32(1), RawData: make([]byte, 8)}), `initializer "w": raw data has 8 bytes`},
		{"value count vs shape", modelWith(&onnxpb.TensorProto{Name: proto.String("w"), Dims: []int64{3}, DataType: proto.Int32(1), FloatData: []float32{1}}), `initializer "w": float_data has 1 values`},
		{"shape overflow", modelWith(&onnxpb.TensorProto{Name: proto.String("w"), Dims: []int64{1 << 31, 1 << 31, 1 << 31}, DataType: proto.Int32(1)}), `initializer "w"`},
		{"negative dim", modelWith(&onnxpb.TensorProto{Name: proto.String("w"), Dims: []int64{-4}, DataType: proto.Int32(1)}), `initializer "w": dimension 0 is -4`},
		{"external file missing", modelWith(ext("nothere.bin", "", "")), `initializer "w": external data`},
		{"external absolute path", modelWith(ext("/etc/passwd", "", "")), "absolute"},
		{"external parent path", modelWith(ext("../blob.bin", "", "")), "leaves the model's folder"},
		{"external offset past end", modelWith(ext("blob.bin", "12", "8")), "past the end"},
		{"external length vs shape", modelWith(ext("blob.bin", "0", "16")), "needs 8"},
	}
	for _, c := range cases {
		path := filepath.Join(dir, strings.ReplaceAll(c.name, " ", "_")+".onnx")
		os.WriteFile(path, c.data, 0o644)
		_, err := LoadModel(path)
		if err == nil {
			t.Errorf("%s: no error", c.name)
			continue
		}
		if !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), filepath.Base(path)) {
			t.Errorf("%s: error %q should name the file and say %q", c.name, err, c.want)
		}
	}
	// the well-formed variant loads, with external data inside the folder
	okPath := filepath.Join(dir, "ok.onnx")
	os.WriteFile(okPath, modelWith(ext("blob.bin", "8", "8")), 0o644)
	if _, err := LoadModel(okPath); err != nil {
		t.Fatalf("valid external data: %v", err)
	}
}

// float16, bfloat16 (in int32_data and raw_data) widen to float32 exactly.
func TestHalfPrecisionWidening(t *testing.T) {
	// 0x3C00 = 1.0, 0xC000 = -2.0, 0x7BFF = 65504 (largest half), 0x0001 = 2^-24 (smallest subnormal)
	half := []int32{0x3C00, 0xC000, 0x7BFF, 0x0001}
	want := []float32{1, -2, 65504, 1.0 / (1 << 24)}
	tp := &onnxpb.TensorProto{Dims: []int64{4}, DataType: proto.Int32(10), Int32Data: half}
	got, err := (&decoder{}).Tensor(tp)
	if err != nil {
		t.Fatal(err)
	}
	for i, w := range want {
		if got.F32()[i] != w {
			t.Errorf("half %#04x → %g, want %g", half[i], got.F32()[i], w)
		}
	}
	// bfloat16 0x3F80 = 1.0, 0xC040 = -3.0 (raw little-endian)
	bf := &onnxpb.TensorProto{Dims: []int64{2}, DataType: proto.Int32(16), RawData: []byte{0x80, 0x3F, 0x40, 0xC0}}
	got, err = (&decoder{}).Tensor(bf)
	if err != nil || got.F32()[0] != 1 || got.F32()[1] != -3 {
		t.Fatalf("bfloat16: %v %v", got, err)
	}
}
