package loader

import (
	"os"
	"path/filepath"
	"testing"
	"unsafe"

	"google.golang.org/protobuf/proto"

	"github.com/vitals-health/vitals/loader/onnxpb"
)

// splitRawData + placeRawData must decode to exactly the message the
// protobuf decoder gives for the whole file. Models: the ONNX project's
// published test models (../shared/onnx-conformance, the light model zoo
// and a sample of node tests) and the reference models under testdata/ref.
func TestSplitRawDataDecodesAsProtobuf(t *testing.T) {
	var files []string
	for _, pat := range []string{"../../shared/onnx-conformance/light/*.onnx", "../../shared/onnx-conformance/node/test_conv*/model.onnx", "../testdata/ref/*.onnx"} {
		m, _ := filepath.Glob(pat)
		files = append(files, m...)
	}
	if len(files) < 20 {
		t.Fatalf("found %d models; want the conformance data beside the project", len(files))
	}
	for _, f := range files {
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		var whole, parts onnxpb.ModelProto
		if err := proto.Unmarshal(b, &whole); err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		stripped, raws, ok := splitRawData(b)
		if !ok {
			t.Fatalf("%s: splitRawData failed on a valid model", f)
		}
		if err := proto.Unmarshal(stripped, &parts); err != nil {
			t.Fatalf("%s: stripped model does not decode: %v", f, err)
		}
		if !placeRawData(parts.Graph, raws) {
			t.Fatalf("%s: raw data do not match the initializers", f)
		}
		if !proto.Equal(&whole, &parts) {
			t.Errorf("%s: split decode differs from the protobuf decoder's", f)
		}
		if mp, err := unmarshalModel(b); err != nil || !proto.Equal(&whole, mp) {
			t.Errorf("%s: unmarshalModel differs from the protobuf decoder (%v)", f, err)
		}
		for i, init := range parts.Graph.GetInitializer() {
			if r := init.RawData; len(r) > 0 && unsafePointer(r)%64 != 0 {
				t.Errorf("%s: initializer %d raw data not 64-byte aligned", f, i)
			}
		}
	}
}

// A malformed message is left to the protobuf decoder.
func TestSplitRawDataMalformed(t *testing.T) {
	for _, b := range [][]byte{{0x3a, 0x05, 0x2a}, {0xff}, {0x3a, 0x02, 0x2a, 0x7f}} {
		if _, _, ok := splitRawData(b); ok {
			t.Errorf("% x: split accepted malformed input", b)
		}
	}
}

func unsafePointer(b []byte) uintptr { return uintptr(unsafe.Pointer(&b[0])) }

// An initializer whose raw_data is present but empty keeps a non-nil empty
// slice, as the protobuf decoder gives it (an empty tensor [0, 5] from the
// decoder fuzz seeds).
func TestSplitRawDataEmptyRaw(t *testing.T) {
	m := &onnxpb.ModelProto{Graph: &onnxpb.GraphProto{Initializer: []*onnxpb.TensorProto{
		{Dims: []int64{0, 5}, DataType: proto.Int32(1), RawData: []byte{}},
	}}}
	b, err := proto.Marshal(m)
	if err != nil {
		t.Fatal(err)
	}
	stripped, raws, ok := splitRawData(b)
	if !ok {
		t.Fatal("split failed")
	}
	var got onnxpb.ModelProto
	if err := proto.Unmarshal(stripped, &got); err != nil {
		t.Fatal(err)
	}
	if !placeRawData(got.Graph, raws) {
		t.Fatal("raw data do not match the initializers")
	}
	if r := got.Graph.Initializer[0].RawData; r == nil || len(r) != 0 {
		t.Fatalf("raw data %v, want present and empty", r)
	}
}

// parallelCopy splits pieces across cores at arbitrary byte offsets; every
// byte must land where a plain copy puts it.
func TestParallelCopy(t *testing.T) {
	sizes := []int{3, 5 << 20, 0, 1234567, 64, 2<<20 + 1}
	var dsts, srcs [][]byte
	total := 0
	for k, n := range sizes {
		src := make([]byte, n)
		for i := range src {
			src[i] = byte(i*7 + k)
		}
		dsts, srcs = append(dsts, make([]byte, n)), append(srcs, src)
		total += n
	}
	parallelCopy(dsts, srcs, total)
	for k := range dsts {
		for i := range dsts[k] {
			if dsts[k][i] != srcs[k][i] {
				t.Fatalf("piece %d byte %d = %d, want %d", k, i, dsts[k][i], srcs[k][i])
			}
		}
	}
}
