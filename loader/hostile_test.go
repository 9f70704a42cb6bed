package loader

import (
	"bytes"
	"encoding/binary"
	"hash/crc32"
	"image"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"

	"google.golang.org/protobuf/proto"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader/onnxpb"
	"github.com/vitals-health/vitals/tensor"
)

// writeModelWith writes dir/model.onnx: y = Identity(x), plus the given initializers.
func writeModelWith(t *testing.T, dir string, inits ...*onnxpb.TensorProto) string {
	t.Helper()
	b := modelbuild.New("hostile", 13)
	b.Input("x", []int{1, 2}, true)
	b.Node("Identity", "id", []string{"x"}, []string{"y"})
	b.Output("y")
	raw, err := b.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	var m onnxpb.ModelProto
	if err := proto.Unmarshal(raw, &m); err != nil {
		t.Fatal(err)
	}
	m.Graph.Initializer = append(m.Graph.Initializer, inits...)
	raw, err = proto.Marshal(&m)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "model.onnx")
	if err := os.WriteFile(path, raw, 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

func float32Bytes(v ...float32) []byte {
	b := make([]byte, 4*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(x))
	}
	return b
}

// hostileLayout makes root/secret (outside), root/model/ (the model's folder)
// with w.bin (8 floats), a symlink model/link.bin → ../secret, a symlinked
// folder model/sub → root/outside/ holding secret, and a symlink
// model/inner.bin → w.bin that stays inside.
func hostileLayout(t *testing.T) (root, dir string) {
	t.Helper()
	root = t.TempDir()
	dir = filepath.Join(root, "model")
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	must(os.MkdirAll(filepath.Join(root, "outside"), 0o755))
	must(os.MkdirAll(filepath.Join(dir, "a"), 0o755))
	secret := float32Bytes(9, 9, 9, 9, 9, 9, 9, 9)
	must(os.WriteFile(filepath.Join(root, "secret"), secret, 0o644))
	must(os.WriteFile(filepath.Join(root, "outside", "secret"), secret, 0o644))
	must(os.WriteFile(filepath.Join(dir, "w.bin"), float32Bytes(1, 2, 3, 4, 5, 6, 7, 8), 0o644))
	must(os.Symlink(filepath.Join(root, "secret"), filepath.Join(dir, "link.bin")))
	must(os.Symlink(filepath.Join(root, "outside"), filepath.Join(dir, "sub")))
	must(os.Symlink("w.bin", filepath.Join(dir, "inner.bin")))
	must(syscall.Mkfifo(filepath.Join(dir, "pipe"), 0o644))
	return root, dir
}

// Every way out of the model's folder is refused, with an error naming the
// initializer; locations inside it (also through an inside symlink) load.
func TestExternalDataConfinement(t *testing.T) {
	root, dir := hostileLayout(t)
	for _, c := range []struct {
		name, loc string
		offset    int64
		length    int64
		dims      []int64
		want      string // "" means: loads
	}{
		{"fifo", "pipe", -1, -1, []int64{8}, "not a regular file"},
		{"plain", "w.bin", -1, -1, []int64{2, 4}, ""},
		{"offset", "w.bin", 16, 16, []int64{4}, ""},
		{"inside-symlink", "inner.bin", -1, -1, []int64{8}, ""},
		{"absolute", filepath.Join(root, "secret"), -1, -1, []int64{8}, "absolute"},
		{"dotdot", "../secret", -1, -1, []int64{8}, "leaves the model's folder"},
		{"nested-dotdot", "a/../../secret", -1, -1, []int64{8}, "leaves the model's folder"},
		{"backslash-dotdot", `a\..\..\secret`, -1, -1, []int64{8}, "leaves the model's folder"},
		{"symlink-out", "link.bin", -1, -1, []int64{8}, "resolves outside"},
		{"symlinked-folder", "sub/secret", -1, -1, []int64{8}, "resolves outside"},
		{"missing", "nope.bin", -1, -1, []int64{8}, "no such file"},
		{"folder", "a", -1, -1, []int64{8}, "not a regular file"},
		{"offset-past-end", "w.bin", 40, 4, []int64{1}, "past the end"},
		{"length-past-end", "w.bin", 16, 32, []int64{8}, "past the end"},
		{"negative-offset", "w.bin", -5, 4, []int64{1}, "past the end"},
		{"length-vs-shape", "w.bin", 0, 16, []int64{8}, "needs 32"},
		{"file-vs-shape", "w.bin", -1, -1, []int64{3, 3}, "needs 36"},
	} {
		t.Run(c.name, func(t *testing.T) {
			tp := externalTensor("weights_"+c.name, c.dims, c.loc, c.offset, c.length)
			if c.offset == -5 {
				tp = externalTensor("weights_"+c.name, c.dims, c.loc, -1, c.length)
				tp.ExternalData = append(tp.ExternalData, &onnxpb.StringStringEntryProto{Key: proto.String("offset"), Value: proto.String("-5")})
			}
			path := writeModelWith(t, dir, tp)
			m, err := LoadModel(path)
			if c.want == "" {
				if err != nil {
					t.Fatalf("refused: %v", err)
				}
				got := m.Graph.Initializers["weights_"+c.name].F32()
				if want := float32(1 + max(c.offset, 0)/4); got[0] != want {
					t.Fatalf("got %v, want values from %v on", got, want)
				}
				return
			}
			if err == nil {
				t.Fatalf("location %q accepted: %v", c.loc, m.Graph.Initializers["weights_"+c.name].F32())
			}
			if !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), `initializer "weights_`+c.name+`"`) {
				t.Errorf("error %q: want it to say %q and name the initializer", err, c.want)
			}
		})
	}
}

// The model's own folder may be reached through a symbolic link.
func TestExternalDataModelFolderThroughSymlink(t *testing.T) {
	root, dir := hostileLayout(t)
	writeModelWith(t, dir, externalTensor("w", []int64{8}, "w.bin", -1, -1))
	if err := os.Symlink(dir, filepath.Join(root, "alias")); err != nil {
		t.Fatal(err)
	}
	if _, err := LoadModel(filepath.Join(root, "alias", "model.onnx")); err != nil {
		t.Fatal(err)
	}
}

// ConfinedPath on its own: the escapes, and what stays inside.
func TestConfinedPath(t *testing.T) {
	root, dir := hostileLayout(t)
	for _, loc := range []string{"", "/etc/passwd", filepath.Join(root, "secret"), "..", "../secret", "a/../../secret", "./../secret", "link.bin", "sub/secret", "sub"} {
		if p, err := ConfinedPath(dir, loc); err == nil {
			t.Errorf("ConfinedPath(%q) = %q, want an error", loc, p)
		}
	}
	for _, loc := range []string{"w.bin", "./w.bin", "a", "inner.bin"} {
		p, err := ConfinedPath(dir, loc)
		if err != nil {
			t.Errorf("ConfinedPath(%q): %v", loc, err)
			continue
		}
		real, _ := filepath.EvalSymlinks(dir)
		if !strings.HasPrefix(p, real+string(filepath.Separator)) {
			t.Errorf("ConfinedPath(%q) = %q, outside %q", loc, p, real)
		}
	}
}

// Memory budget at load: the sum of the initializers' declared sizes, and an
// external tensor before any byte of it is read; errors name tensor and bytes.
func TestLoadMemoryBudget(t *testing.T) {
	prev := tensor.SetMemoryBudget(1000)
	defer tensor.SetMemoryBudget(prev)
	dir := t.TempDir()
	small := func(name string) *onnxpb.TensorProto {
		return &onnxpb.TensorProto{Name: proto.String(name), Dims: []int64{100}, DataType: proto.Int32(1), RawData: make([]byte, 400)}
	}
	// each 400 bytes fits, three of them do not
	if _, err := LoadModel(writeModelWith(t, dir, small("a"), small("b"))); err != nil {
		t.Fatalf("800 bytes of initializers refused: %v", err)
	}
	_, err := LoadModel(writeModelWith(t, dir, small("a"), small("b"), small("c")))
	if err == nil || !strings.Contains(err.Error(), "initializers") || !strings.Contains(err.Error(), "1200 bytes") || !strings.Contains(err.Error(), "--max-memory") {
		t.Errorf("1200 bytes of initializers: %v", err)
	}
	// declared huge, external: refused before the (tiny) file is opened
	os.WriteFile(filepath.Join(dir, "w.bin"), make([]byte, 16), 0o644)
	_, err = LoadModel(writeModelWith(t, dir, externalTensor("huge", []int64{1 << 20, 1 << 10}, "w.bin", -1, -1)))
	if err == nil || !strings.Contains(err.Error(), `"huge"`) || !strings.Contains(err.Error(), "4294967296 bytes") {
		t.Errorf("huge external tensor: %v", err)
	}
	// a sparse initializer whose dense form is over the budget
	tensor.SetMemoryBudget(1 << 20)
	sp := &onnxpb.SparseTensorProto{Dims: []int64{1 << 30},
		Values:  &onnxpb.TensorProto{Name: proto.String("sparse"), Dims: []int64{1}, DataType: proto.Int32(1), FloatData: []float32{1}},
		Indices: &onnxpb.TensorProto{Dims: []int64{1}, DataType: proto.Int32(7), Int64Data: []int64{5}}}
	b := modelbuild.New("sparse", 13)
	b.Input("x", []int{1}, false)
	b.Node("Identity", "id", []string{"x"}, []string{"y"})
	b.Output("y")
	raw, _ := b.Bytes()
	var m onnxpb.ModelProto
	proto.Unmarshal(raw, &m)
	m.Graph.SparseInitializer = append(m.Graph.SparseInitializer, sp)
	raw, _ = proto.Marshal(&m)
	if _, err := DecodeModel(raw, ""); err == nil || !strings.Contains(err.Error(), "memory budget") {
		t.Errorf("huge sparse initializer: %v", err)
	}
}

// Shapes whose element count overflows are refused, whatever the budget.
func TestTensorShapeOverflow(t *testing.T) {
	for _, dims := range [][]int64{{1 << 40, 1 << 40}, {-1}, {1 << 62}, {1 << 21, 1 << 21}} {
		b, _ := proto.Marshal(&onnxpb.TensorProto{Dims: dims, DataType: proto.Int32(1)})
		if _, err := DecodeTensor(b); err == nil {
			t.Errorf("dims %v accepted", dims)
		}
	}
}

// A model file over the protobuf limit is refused by its size (a sparse
// file: nothing is written), pointing at external data.
func TestLoadModelOver2GiB(t *testing.T) {
	path := filepath.Join(t.TempDir(), "big.onnx")
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	f.Close()
	if err := os.Truncate(path, MaxProtoBytes+1); err != nil {
		t.Skipf("cannot make a sparse file here: %v", err)
	}
	_, err = LoadModel(path)
	if err == nil || !strings.Contains(err.Error(), "2 GiB") || !strings.Contains(err.Error(), "external data") || !strings.Contains(err.Error(), "big.onnx") {
		t.Errorf("over 2 GiB: %v", err)
	}
}

// An image whose header claims more pixels than MaxImagePixels (each side
// under MaxImageSide) is refused from its header, before decoding.
func TestImageHeaderPixelLimit(t *testing.T) {
	dir := t.TempDir()
	var b bytes.Buffer
	png.Encode(&b, image.NewGray(image.Rect(0, 0, 1, 1)))
	p := b.Bytes()
	binary.BigEndian.PutUint32(p[16:], 12000)
	binary.BigEndian.PutUint32(p[20:], 12000)
	binary.BigEndian.PutUint32(p[29:], crc32.ChecksumIEEE(p[12:29]))
	os.WriteFile(filepath.Join(dir, "wide.png"), p, 0o644)
	src, err := OpenImages(dir, ImageOptions{Height: 4, Width: 4})
	if err != nil {
		t.Fatal(err)
	}
	_, err = src.Next(1)
	if err == nil || !strings.Contains(err.Error(), "wide.png") || !strings.Contains(err.Error(), "12000×12000") {
		t.Errorf("144-Mpixel header: %v", err)
	}
}
