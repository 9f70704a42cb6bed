package loader

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"unsafe"

	"google.golang.org/protobuf/proto"

	"github.com/vitals-health/vitals/loader/onnxpb"
	"github.com/vitals-health/vitals/tensor"
)

// MaxProtoBytes is the protobuf format's 2 GiB message limit; larger models keep weights in external data.
const MaxProtoBytes = 2<<30 - 1

// LoadModel reads and decodes an ONNX model file. External data is resolved
// relative to the model's folder and may not leave it.
func LoadModel(path string) (*Model, error) { return LoadModelIn(path, nil) }

// LoadModelIn is LoadModel with the memory budget of ar (nil: the process
// default, tensor.SetMemoryBudget): every initializer, and their sum, is
// checked against it before it is decoded.
func LoadModelIn(path string, ar *tensor.Arena) (*Model, error) {
	fi, err := os.Stat(path)
	if err != nil {
		return nil, fmt.Errorf("loading model %q: %w", path, err)
	}
	if fi.IsDir() {
		return nil, fmt.Errorf("loading model %q: is a folder, not an .onnx file", path)
	}
	if fi.Size() > MaxProtoBytes {
		return nil, fmt.Errorf("loading model %q: %d bytes is over the protobuf 2 GiB limit; ONNX keeps weights of such models in external data files", path, fi.Size())
	}
	var m *Model
	// DecodeModel keeps no reference to the bytes (the weights are copied by
	// placeRawData, the rest by the protobuf decoder)
	err = withFileBytes(path, func(b []byte) (err error) {
		m, err = DecodeModelIn(b, filepath.Dir(path), ar)
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("loading model %q: %w", path, err)
	}
	m.Path = path
	return m, nil
}

// DecodeModel decodes a serialized ModelProto; dir is the folder external data is read from ("" forbids external data).
func DecodeModel(b []byte, dir string) (*Model, error) { return DecodeModelIn(b, dir, nil) }

// DecodeModelIn is DecodeModel with the memory budget of ar (nil: the process default).
func DecodeModelIn(b []byte, dir string, ar *tensor.Arena) (*Model, error) {
	mp, err := unmarshalModel(b)
	if err != nil {
		return nil, fmt.Errorf("not an ONNX model (protobuf decode failed): %w", err)
	}
	if mp.Graph == nil {
		return nil, errors.New("not an ONNX model: no graph")
	}
	m := &Model{
		IRVersion:       mp.GetIrVersion(),
		Producer:        mp.GetProducerName(),
		ProducerVersion: mp.GetProducerVersion(),
		Domain:          mp.GetDomain(),
		ModelVersion:    mp.GetModelVersion(),
		DocString:       mp.GetDocString(),
		Metadata:        map[string]string{},
		Opsets:          map[string]int64{},
	}
	for _, kv := range mp.GetMetadataProps() {
		m.Metadata[kv.GetKey()] = kv.GetValue()
	}
	for _, o := range mp.GetOpsetImport() {
		d := o.GetDomain()
		if d == "ai.onnx" {
			d = ""
		}
		m.Opsets[d] = o.GetVersion()
	}
	if len(m.Opsets) == 0 {
		m.Opsets[""] = 1 // IR v3 files without opset_import: the spec says assume opset 1
	}
	d := &decoder{dir: dir, ar: ar}
	g, err := d.graph(mp.Graph)
	if err != nil {
		return nil, err
	}
	if len(g.Nodes) == 0 && len(g.Outputs) == 0 {
		return nil, errors.New("graph is empty: no nodes and no outputs")
	}
	m.Graph = g
	return m, nil
}

type decoder struct {
	dir string
	ar  *tensor.Arena // the budget initializers are held to
	gen int           // counter for generated node names
	// declared sums the storage the model's initializers declare (all graphs),
	// checked against the memory budget before any of them is decoded.
	declared int64
}

// declaredBytes is the storage a TensorProto's dims and data type ask for,
// saturating; malformed dims count as 0 (decoding reports them).
func declaredBytes(tp *onnxpb.TensorProto) int64 {
	shape := make([]int, len(tp.GetDims()))
	for i, v := range tp.GetDims() {
		if v < 0 || v > tensor.MaxElements {
			return 0
		}
		shape[i] = int(v)
	}
	n, err := tensor.NumElements(shape)
	if err != nil {
		return 0
	}
	return tensor.Bytes(storeType(tensor.DType(tp.GetDataType())), n)
}

// storeType is the type a tensor of dt is held in (half floats are widened).
func storeType(dt tensor.DType) tensor.DType {
	if dt == tensor.Float16 || dt == tensor.BFloat16 {
		return tensor.Float32
	}
	return dt
}

func (d *decoder) graph(gp *onnxpb.GraphProto) (*Graph, error) {
	g := &Graph{
		Name:         gp.GetName(),
		Initializers: map[string]*tensor.Tensor{},
		ValueInfo:    map[string]ValueInfo{},
	}
	inits := gp.GetInitializer()
	// Budget before decoding: each declared initializer, then their sum.
	declare := func(name string, dims []int64, dt int32) error {
		b := declaredBytes(&onnxpb.TensorProto{Dims: dims, DataType: proto.Int32(dt)})
		d.declared = satAdd(d.declared, b)
		return d.ar.CheckBytes(b, func() string {
			return fmt.Sprintf("initializer %q (shape %v of %v)", name, dims, storeType(tensor.DType(dt)))
		})
	}
	for _, tp := range inits {
		if err := declare(tp.GetName(), tp.GetDims(), tp.GetDataType()); err != nil {
			return nil, err
		}
	}
	for _, sp := range gp.GetSparseInitializer() {
		if err := declare(sp.GetValues().GetName(), sp.GetDims(), sp.GetValues().GetDataType()); err != nil {
			return nil, err
		}
	}
	if err := d.ar.CheckBytes(d.declared, func() string {
		return fmt.Sprintf("storage for the model's initializers (%d in graph %q, with enclosing graphs)", len(inits), gp.GetName())
	}); err != nil {
		return nil, err
	}
	for _, tp := range inits {
		t, err := d.Tensor(tp)
		if err != nil {
			return nil, fmt.Errorf("initializer %q: %w", tp.GetName(), err)
		}
		if _, dup := g.Initializers[tp.GetName()]; !dup {
			g.InitOrder = append(g.InitOrder, tp.GetName())
		}
		g.Initializers[tp.GetName()] = t
		if dt := tensor.DType(tp.GetDataType()); dt == tensor.Float16 || dt == tensor.BFloat16 {
			if g.Half == nil {
				g.Half = map[string]tensor.DType{}
			}
			g.Half[tp.GetName()] = dt
		}
	}
	for _, sp := range gp.GetSparseInitializer() {
		t, err := d.sparse(sp)
		if err != nil {
			return nil, fmt.Errorf("sparse initializer %q: %w", sp.GetValues().GetName(), err)
		}
		name := sp.GetValues().GetName()
		g.InitOrder = append(g.InitOrder, name)
		g.Initializers[name] = t
	}
	for _, vi := range gp.GetInput() {
		v := valueInfo(vi)
		if _, ok := g.Initializers[v.Name]; ok {
			g.DefaultInputs = append(g.DefaultInputs, v)
		} else {
			g.Inputs = append(g.Inputs, v)
		}
	}
	for _, vi := range gp.GetOutput() {
		g.Outputs = append(g.Outputs, valueInfo(vi))
	}
	for _, vi := range gp.GetValueInfo() {
		g.ValueInfo[vi.GetName()] = valueInfo(vi)
	}
	names := map[string]bool{}
	for i, np := range gp.GetNode() {
		n := &Node{
			Name: np.GetName(), OpType: np.GetOpType(), Domain: np.GetDomain(),
			Inputs: np.GetInput(), Outputs: np.GetOutput(), Attrs: map[string]*Attr{},
		}
		if n.Domain == "ai.onnx" {
			n.Domain = ""
		}
		if n.Name == "" || names[n.Name] {
			n.Name = fmt.Sprintf("%s_%d", n.OpType, i)
			if g.Name != "" && d.gen > 0 {
				n.Name = g.Name + "/" + n.Name
			}
		}
		names[n.Name] = true
		if n.OpType == "" {
			return nil, fmt.Errorf("node %d (%q) has no op_type", i, n.Name)
		}
		for _, ap := range np.GetAttribute() {
			a, err := d.attr(ap)
			if err != nil {
				return nil, fmt.Errorf("node %q (%s) attribute %q: %w", n.Name, n.OpType, ap.GetName(), err)
			}
			n.Attrs[a.Name] = a
		}
		g.Nodes = append(g.Nodes, n)
	}
	return g, nil
}

func (d *decoder) attr(ap *onnxpb.AttributeProto) (*Attr, error) {
	a := &Attr{Name: ap.GetName(), Kind: AttrKind(ap.GetType()), RefAttr: ap.GetRefAttrName()}
	if a.Kind == AttrUndefined {
		// Very old files leave type unset: infer it from the populated field.
		switch {
		case ap.F != nil:
			a.Kind = AttrFloat
		case ap.I != nil:
			a.Kind = AttrInt
		case ap.S != nil:
			a.Kind = AttrString
		case ap.T != nil:
			a.Kind = AttrTensor
		case ap.G != nil:
			a.Kind = AttrGraph
		case len(ap.Floats) > 0:
			a.Kind = AttrFloats
		case len(ap.Ints) > 0:
			a.Kind = AttrInts
		case len(ap.Strings) > 0:
			a.Kind = AttrStrings
		}
	}
	a.F, a.I, a.S = ap.GetF(), ap.GetI(), string(ap.GetS())
	a.Floats, a.Ints = ap.GetFloats(), ap.GetInts()
	for _, s := range ap.GetStrings() {
		a.Strings = append(a.Strings, string(s))
	}
	var err error
	if ap.T != nil {
		if a.T, err = d.Tensor(ap.T); err != nil {
			return nil, err
		}
	}
	if ap.SparseTensor != nil {
		if a.T, err = d.sparse(ap.SparseTensor); err != nil {
			return nil, err
		}
	}
	for _, tp := range ap.GetTensors() {
		t, err := d.Tensor(tp)
		if err != nil {
			return nil, err
		}
		a.Tensors = append(a.Tensors, t)
	}
	d.gen++
	defer func() { d.gen-- }()
	if ap.G != nil {
		if a.G, err = d.graph(ap.G); err != nil {
			return nil, fmt.Errorf("subgraph: %w", err)
		}
	}
	for _, gp := range ap.GetGraphs() {
		g, err := d.graph(gp)
		if err != nil {
			return nil, fmt.Errorf("subgraph: %w", err)
		}
		a.Graphs = append(a.Graphs, g)
	}
	return a, nil
}

func valueInfo(vi *onnxpb.ValueInfoProto) ValueInfo {
	v := ValueInfo{Name: vi.GetName()}
	tp := vi.GetType()
	switch {
	case tp.GetTensorType() != nil:
		tt := tp.GetTensorType()
		v.Kind, v.HasType = "tensor", true
		v.DType = tensor.DType(tt.GetElemType())
		if tt.Shape != nil {
			v.Shape = []int{}
			v.Symbols = []string{}
			for _, dim := range tt.Shape.GetDim() {
				if dim.GetDimParam() != "" || dim.Value == nil {
					v.Shape = append(v.Shape, -1)
					v.Symbols = append(v.Symbols, dim.GetDimParam())
				} else {
					v.Shape = append(v.Shape, int(dim.GetDimValue()))
					v.Symbols = append(v.Symbols, "")
				}
			}
		}
	case tp.GetSequenceType() != nil:
		v.Kind = "sequence"
	case tp.GetMapType() != nil:
		v.Kind = "map"
	case tp.GetOptionalType() != nil:
		v.Kind = "optional"
	}
	return v
}

// DecodeTensorFile reads a serialized TensorProto (the ONNX test-data .pb format).
func DecodeTensorFile(path string) (*tensor.Tensor, string, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, "", fmt.Errorf("reading tensor %q: %w", path, err)
	}
	var tp onnxpb.TensorProto
	if err := proto.Unmarshal(b, &tp); err != nil {
		return nil, "", fmt.Errorf("reading tensor %q: not a TensorProto: %w", path, err)
	}
	d := &decoder{dir: filepath.Dir(path)}
	t, err := d.Tensor(&tp)
	if err != nil {
		return nil, "", fmt.Errorf("reading tensor %q: %w", path, err)
	}
	return t, tp.GetName(), nil
}

// DecodeTensor decodes a serialized TensorProto held in memory (no external data allowed).
func DecodeTensor(b []byte) (*tensor.Tensor, error) {
	var tp onnxpb.TensorProto
	if err := proto.Unmarshal(b, &tp); err != nil {
		return nil, fmt.Errorf("not a TensorProto: %w", err)
	}
	return (&decoder{}).Tensor(&tp)
}

func satAdd(a, b int64) int64 {
	if a > 1<<62 || b > 1<<62 {
		return 1<<63 - 1
	}
	return a + b
}

// Tensor converts a TensorProto to a tensor, widening float16/bfloat16 to
// float32. The shape is checked for overflow and against the memory budget
// before anything is read or allocated.
func (d *decoder) Tensor(tp *onnxpb.TensorProto) (*tensor.Tensor, error) {
	shape := make([]int, len(tp.GetDims()))
	for i, v := range tp.GetDims() {
		if v < 0 || v > tensor.MaxElements {
			return nil, fmt.Errorf("dimension %d is %d", i, v)
		}
		shape[i] = int(v)
	}
	n, err := tensor.NumElements(shape)
	if err != nil {
		return nil, err
	}
	dt := tensor.DType(tp.GetDataType())
	store := storeType(dt)
	if !store.Supported() {
		return nil, fmt.Errorf("unsupported data type %v", dt)
	}
	if err := d.ar.CheckBytes(tensor.Bytes(store, n), func() string { return fmt.Sprintf("shape %v of %v", shape, store) }); err != nil {
		return nil, err
	}
	raw := tp.GetRawData()
	hasRaw := tp.RawData != nil
	t := &tensor.Tensor{DType: store, Shape: shape}
	if tp.GetDataLocation() == onnxpb.TensorProto_EXTERNAL {
		if dt == tensor.String {
			return nil, errors.New("string tensors cannot live in external data")
		}
		sec, closeFn, err := d.external(tp, n*dt.Size())
		if err != nil {
			return nil, err
		}
		defer closeFn()
		// Read straight into the tensor's storage where the file's layout is
		// the host's, so a large weight is never held twice.
		if data, ok, err := readNative(sec, dt, n); ok {
			if err != nil {
				return nil, fmt.Errorf("external data: %w", err)
			}
			t.Data = data
			return t, nil
		}
		raw = make([]byte, n*dt.Size())
		if _, err := io.ReadFull(sec, raw); err != nil {
			return nil, fmt.Errorf("external data: %w", err)
		}
		hasRaw = true
	}
	if hasRaw && dt != tensor.String {
		if len(raw) != n*dt.Size() {
			return nil, fmt.Errorf("raw data has %d bytes, shape %v of %v needs %d", len(raw), shape, dt, n*dt.Size())
		}
		t.Data = fromRaw(dt, raw, n)
		return t, nil
	}
	t.Data, err = fromTyped(tp, dt, n)
	if err != nil {
		return nil, err
	}
	return t, nil
}

// fromRaw decodes little-endian raw bytes.
func fromRaw(dt tensor.DType, raw []byte, n int) any {
	le := binary.LittleEndian
	if out, ok := fromRawNative(dt, raw, n); ok {
		return out
	}
	switch dt {
	case tensor.Float32:
		out := make([]float32, n)
		for i := range out {
			out[i] = math.Float32frombits(le.Uint32(raw[4*i:]))
		}
		return out
	case tensor.Float16, tensor.BFloat16:
		out := make([]float32, n)
		for i := range out {
			out[i] = halfToFloat(dt, le.Uint16(raw[2*i:]))
		}
		return out
	case tensor.Float64:
		out := make([]float64, n)
		for i := range out {
			out[i] = math.Float64frombits(le.Uint64(raw[8*i:]))
		}
		return out
	case tensor.Int64:
		out := make([]int64, n)
		for i := range out {
			out[i] = int64(le.Uint64(raw[8*i:]))
		}
		return out
	case tensor.Uint64:
		out := make([]uint64, n)
		for i := range out {
			out[i] = le.Uint64(raw[8*i:])
		}
		return out
	case tensor.Int32:
		out := make([]int32, n)
		for i := range out {
			out[i] = int32(le.Uint32(raw[4*i:]))
		}
		return out
	case tensor.Uint32:
		out := make([]uint32, n)
		for i := range out {
			out[i] = le.Uint32(raw[4*i:])
		}
		return out
	case tensor.Int16:
		out := make([]int16, n)
		for i := range out {
			out[i] = int16(le.Uint16(raw[2*i:]))
		}
		return out
	case tensor.Uint16:
		out := make([]uint16, n)
		for i := range out {
			out[i] = le.Uint16(raw[2*i:])
		}
		return out
	case tensor.Int8:
		out := make([]int8, n)
		for i := range out {
			out[i] = int8(raw[i])
		}
		return out
	case tensor.Uint8:
		out := make([]uint8, n)
		copy(out, raw)
		return out
	case tensor.Bool:
		out := make([]bool, n)
		for i := range out {
			out[i] = raw[i] != 0
		}
		return out
	}
	return nil
}

// fromTyped decodes the typed repeated fields (float_data, int32_data, ...).
func fromTyped(tp *onnxpb.TensorProto, dt tensor.DType, n int) (any, error) {
	check := func(have int, field string) error {
		if have != n {
			return fmt.Errorf("%s has %d values, shape %v needs %d", field, have, tp.GetDims(), n)
		}
		return nil
	}
	switch dt {
	case tensor.Float32:
		return tp.GetFloatData(), check(len(tp.GetFloatData()), "float_data")
	case tensor.Float64:
		return tp.GetDoubleData(), check(len(tp.GetDoubleData()), "double_data")
	case tensor.Int64:
		return tp.GetInt64Data(), check(len(tp.GetInt64Data()), "int64_data")
	case tensor.Uint64:
		return tp.GetUint64Data(), check(len(tp.GetUint64Data()), "uint64_data")
	case tensor.Uint32:
		u := tp.GetUint64Data()
		out := make([]uint32, len(u))
		for i, v := range u {
			out[i] = uint32(v)
		}
		return out, check(len(u), "uint64_data")
	case tensor.String:
		s := tp.GetStringData()
		out := make([]string, len(s))
		for i, v := range s {
			out[i] = string(v)
		}
		return out, check(len(s), "string_data")
	}
	// The remaining types travel in int32_data.
	src := tp.GetInt32Data()
	if err := check(len(src), "int32_data"); err != nil {
		return nil, err
	}
	switch dt {
	case tensor.Int32:
		return src, nil
	case tensor.Float16, tensor.BFloat16:
		out := make([]float32, n)
		for i, v := range src {
			out[i] = halfToFloat(dt, uint16(v))
		}
		return out, nil
	case tensor.Int16:
		out := make([]int16, n)
		for i, v := range src {
			out[i] = int16(v)
		}
		return out, nil
	case tensor.Uint16:
		out := make([]uint16, n)
		for i, v := range src {
			out[i] = uint16(v)
		}
		return out, nil
	case tensor.Int8:
		out := make([]int8, n)
		for i, v := range src {
			out[i] = int8(v)
		}
		return out, nil
	case tensor.Uint8:
		out := make([]uint8, n)
		for i, v := range src {
			out[i] = uint8(v)
		}
		return out, nil
	case tensor.Bool:
		out := make([]bool, n)
		for i, v := range src {
			out[i] = v != 0
		}
		return out, nil
	}
	return nil, fmt.Errorf("unsupported data type %v", dt)
}

// halfToFloat widens an IEEE binary16 or bfloat16 bit pattern.
func halfToFloat(dt tensor.DType, h uint16) float32 {
	if dt == tensor.BFloat16 {
		return math.Float32frombits(uint32(h) << 16)
	}
	sign := uint32(h>>15) << 31
	exp := uint32(h>>10) & 0x1f
	mant := uint32(h) & 0x3ff
	switch {
	case exp == 0 && mant == 0:
		return math.Float32frombits(sign)
	case exp == 0: // subnormal
		f := float32(mant) / 1024 / 16384
		if sign != 0 {
			return -f
		}
		return f
	case exp == 31:
		return math.Float32frombits(sign | 0xff<<23 | mant<<13)
	}
	return math.Float32frombits(sign | (exp+112)<<23 | mant<<13)
}

// littleEndianHost reports whether the machine stores numbers little-endian (as ONNX raw data does).
var littleEndianHost = func() bool { x := uint16(1); return *(*byte)(unsafe.Pointer(&x)) == 1 }()

// readNative reads n elements of dt from r directly into a new typed slice
// when the host is little-endian and dt is stored as is; ok is false otherwise.
func readNative(r io.Reader, dt tensor.DType, n int) (data any, ok bool, err error) {
	if !littleEndianHost || storeType(dt) != dt || dt == tensor.Bool || dt == tensor.String {
		return nil, false, nil
	}
	data = tensor.MakeSlice(dt, n)
	if n == 0 {
		return data, true, nil
	}
	var p unsafe.Pointer
	switch d := data.(type) {
	case []float32:
		p = unsafe.Pointer(&d[0])
	case []float64:
		p = unsafe.Pointer(&d[0])
	case []int64:
		p = unsafe.Pointer(&d[0])
	case []int32:
		p = unsafe.Pointer(&d[0])
	case []uint64:
		p = unsafe.Pointer(&d[0])
	case []uint32:
		p = unsafe.Pointer(&d[0])
	case []int16:
		p = unsafe.Pointer(&d[0])
	case []uint16:
		p = unsafe.Pointer(&d[0])
	case []int8:
		p = unsafe.Pointer(&d[0])
	case []uint8:
		p = unsafe.Pointer(&d[0])
	default:
		return nil, false, nil
	}
	_, err = io.ReadFull(r, unsafe.Slice((*byte)(p), n*dt.Size()))
	return data, true, err
}

// external opens a tensor's section of its external data file, confined to
// d.dir, after checking it: a regular file, offset and length inside it, and
// length equal to want (the bytes the shape needs).
func (d *decoder) external(tp *onnxpb.TensorProto, want int) (*io.SectionReader, func() error, error) {
	var loc string
	offset, length := int64(0), int64(-1)
	for _, kv := range tp.GetExternalData() {
		var err error
		switch kv.GetKey() {
		case "location":
			loc = kv.GetValue()
		case "offset":
			offset, err = strconv.ParseInt(kv.GetValue(), 10, 64)
		case "length":
			length, err = strconv.ParseInt(kv.GetValue(), 10, 64)
		}
		if err != nil {
			return nil, nil, fmt.Errorf("external data %s: %w", kv.GetKey(), err)
		}
	}
	if d.dir == "" {
		return nil, nil, errors.New("external data is not allowed here")
	}
	path, err := ConfinedPath(d.dir, loc)
	if err != nil {
		return nil, nil, fmt.Errorf("external data: %w", err)
	}
	// stat before opening: opening a FIFO or device could block or never end
	if fi, err := os.Stat(path); err != nil {
		return nil, nil, fmt.Errorf("external data: %w", err)
	} else if !fi.Mode().IsRegular() {
		return nil, nil, fmt.Errorf("external data %q is not a regular file", loc)
	}
	f, err := os.Open(path)
	if err != nil {
		return nil, nil, fmt.Errorf("external data: %w", err)
	}
	fi, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, nil, fmt.Errorf("external data: %w", err)
	}
	if !fi.Mode().IsRegular() {
		f.Close()
		return nil, nil, fmt.Errorf("external data %q is not a regular file", loc)
	}
	if length < 0 {
		length = fi.Size() - offset
	}
	if offset < 0 || offset > fi.Size() || length > fi.Size()-offset {
		f.Close()
		return nil, nil, fmt.Errorf("external data %q: offset %d + length %d is past the end of the %d-byte file", loc, offset, length, fi.Size())
	}
	if int(length) != want {
		f.Close()
		return nil, nil, fmt.Errorf("external data %q: %d bytes, shape %v needs %d", loc, length, tp.GetDims(), want)
	}
	return io.NewSectionReader(f, offset, length), f.Close, nil
}

// ConfinedPath joins a relative location to dir and refuses anything that
// leaves dir: absolute paths, ".." components, and symbolic links resolving outside.
func ConfinedPath(dir, loc string) (string, error) {
	if loc == "" {
		return "", errors.New("empty location")
	}
	if filepath.IsAbs(loc) || strings.HasPrefix(loc, "/") || strings.HasPrefix(loc, `\`) || filepath.VolumeName(loc) != "" {
		return "", fmt.Errorf("location %q is absolute; only paths inside the model's folder are allowed", loc)
	}
	for _, part := range strings.FieldsFunc(loc, func(r rune) bool { return r == '/' || r == '\\' }) {
		if part == ".." {
			return "", fmt.Errorf("location %q leaves the model's folder", loc)
		}
	}
	full := filepath.Join(dir, loc)
	realDir, err := filepath.EvalSymlinks(dir)
	if err != nil {
		return "", err
	}
	realFull, err := filepath.EvalSymlinks(full)
	if err != nil {
		return "", err
	}
	rel, err := filepath.Rel(realDir, realFull)
	if err != nil || rel == ".." || strings.HasPrefix(rel, ".."+string(filepath.Separator)) || filepath.IsAbs(rel) {
		return "", fmt.Errorf("location %q resolves outside the model's folder", loc)
	}
	return realFull, nil
}

// sparse densifies a SparseTensorProto.
func (d *decoder) sparse(sp *onnxpb.SparseTensorProto) (*tensor.Tensor, error) {
	vals, err := d.Tensor(sp.GetValues())
	if err != nil {
		return nil, err
	}
	idx, err := d.Tensor(sp.GetIndices())
	if err != nil {
		return nil, err
	}
	shape := make([]int, len(sp.GetDims()))
	for i, v := range sp.GetDims() {
		if v < 0 || v > tensor.MaxElements {
			return nil, fmt.Errorf("sparse dimension %d is %d", i, v)
		}
		shape[i] = int(v)
	}
	n, err := d.ar.CheckShape(vals.DType, shape)
	if err != nil {
		return nil, err
	}
	if vals.Rank() != 1 {
		return nil, fmt.Errorf("sparse values have shape %v, want one axis [NNZ]", vals.Shape)
	}
	if idx.DType != tensor.Int64 && idx.DType != tensor.Int32 {
		return nil, fmt.Errorf("sparse indices are %v, want int64", idx.DType)
	}
	nnz := vals.Size()
	switch {
	case idx.Rank() == 1 && idx.Shape[0] == nnz:
	case idx.Rank() == 2 && idx.Shape[0] == nnz && idx.Shape[1] == len(shape):
	default:
		return nil, fmt.Errorf("sparse indices have shape %v; with %d values and shape %v want [%d] or [%d %d]", idx.Shape, nnz, shape, nnz, nnz, len(shape))
	}
	out := &tensor.Tensor{DType: vals.DType, Shape: shape, Data: d.ar.MakeSlice(vals.DType, n)}
	ix := idx.Ints()
	for k := 0; k < nnz; k++ {
		var flat int
		if idx.Rank() == 1 {
			flat = ix[k]
		} else {
			for j, dim := range shape {
				v := ix[k*len(shape)+j]
				if v < 0 || v >= dim {
					return nil, fmt.Errorf("sparse index %d of value %d is %d, out of range for shape %v", j, k, v, shape)
				}
				flat = flat*dim + v
			}
		}
		if flat < 0 || flat >= n {
			return nil, fmt.Errorf("sparse index %d out of range for shape %v", flat, shape)
		}
		tensor.CopyData(sliceRange(out.Data, flat, flat+1), sliceRange(vals.Data, k, k+1))
	}
	return out, nil
}
