package check

import (
	"fmt"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// Inputs that do not vary per sample, and inputs whose sample axis is not
// the first.
//
// The model's batch dimension is a symbolic dimension of its per-sample
// inputs (batchSymbol). A fixed input (Sample.Fixed) is fed the same value in
// every batch; when its declared shape carries the batch dimension (the
// "batch" of [2, batch, 128]) the value is repeated along that axis to the
// batch size. A per-sample input whose declared shape carries the batch
// dimension on another axis than the first ([T, batch, F]) takes the files'
// samples (axis 0) and has them moved to that axis.

// constInput is one input fed the same value in every batch.
type constInput struct {
	vi   loader.ValueInfo
	spec string // as given, for messages: "FILE", "VALUE" or "zeros"
	// value is the tensor from the file or the scalar (nil: zeros); axis is
	// the batch axis of the declared shape (−1: none) and insert says that
	// value lacks that axis (it is inserted, then repeated).
	value  *tensor.Tensor
	fill   float64
	axis   int
	insert bool
	byK    map[int]*tensor.Tensor // the tensor fed at batch size k
}

// batchSymbol is the name of the model's batch dimension: the first
// symbolic dimension named like a batch ("batch", "batch_size", "N", "n")
// among the per-sample inputs, else the symbol of their first axis ("" when
// none is symbolic by name).
func batchSymbol(g *loader.Graph, perSample func(string) bool) string {
	for _, in := range g.Inputs {
		if !perSample(in.Name) {
			continue
		}
		for _, s := range in.Symbols {
			if l := strings.ToLower(s); strings.Contains(l, "batch") || l == "n" {
				return s
			}
		}
	}
	for _, in := range g.Inputs {
		if perSample(in.Name) && len(in.Symbols) > 0 && in.Symbols[0] != "" {
			return in.Symbols[0]
		}
	}
	return ""
}

// batchAxis is the axis of vi's declared shape that carries the batch
// dimension sym, or −1.
func batchAxis(vi loader.ValueInfo, sym string) int {
	if sym == "" {
		return -1
	}
	for i, s := range vi.Symbols {
		if s == sym {
			return i
		}
	}
	return -1
}

// openConst reads one --fixed NAME=SPEC for input vi (sym: the batch dimension).
func openConst(vi loader.ValueInfo, spec, sym string) (*constInput, error) {
	c := &constInput{vi: vi, spec: spec, axis: batchAxis(vi, sym), byK: map[int]*tensor.Tensor{}}
	flag := fmt.Sprintf("--fixed %s=%s", vi.Name, spec)
	want := vi.DType
	if want == tensor.Float16 || want == tensor.BFloat16 || !vi.HasType {
		want = tensor.Float32
	}
	if spec == "zeros" {
		return c, c.declaredOK(flag)
	}
	if v, err := strconv.ParseFloat(spec, 64); err == nil {
		switch want {
		case tensor.Float32, tensor.Float64, tensor.Int64, tensor.Int32:
		default:
			return nil, fmt.Errorf("%s: input %q is %v; a number fits float and integer inputs only: pass a file", flag, vi.Name, vi.DType)
		}
		if (want == tensor.Int64 || want == tensor.Int32) && v != float64(int64(v)) {
			return nil, fmt.Errorf("%s: input %q is %v, and %s is not a whole number", flag, vi.Name, vi.DType, spec)
		}
		c.fill = v
		return c, c.declaredOK(flag)
	}
	var t *tensor.Tensor
	var err error
	switch strings.ToLower(filepath.Ext(spec)) {
	case ".npy":
		t, err = loader.ReadNpy(spec)
	case ".pb":
		t, _, err = loader.DecodeTensorFile(spec)
	default:
		return nil, fmt.Errorf("%s: want a .npy or .pb file, a number or zeros", flag)
	}
	if err != nil {
		return nil, fmt.Errorf("%s: %w", flag, err)
	}
	t = convertTo(want, t)
	if vi.HasType && t.DType != want {
		return nil, fmt.Errorf("%s: input %q: model expects %v, the file holds %v", flag, vi.Name, vi.DType, t.DType)
	}
	c.value = t
	if vi.Shape == nil {
		return c, nil
	}
	shape := t.Shape
	if c.axis >= 0 && len(shape) == len(vi.Shape)-1 {
		c.insert = true
		shape = append(append(append([]int{}, shape[:c.axis]...), 1), shape[c.axis:]...)
	}
	ok := len(shape) == len(vi.Shape)
	for i := 0; ok && i < len(shape); i++ {
		switch {
		case i == c.axis:
			ok = shape[i] == 1
		case vi.Shape[i] >= 0:
			ok = shape[i] == vi.Shape[i]
		}
	}
	if !ok {
		hint := ""
		if c.axis >= 0 {
			hint = fmt.Sprintf("; the batch axis %d (%s) takes size 1 or is left out, and is repeated to the batch size", c.axis, sym)
		}
		return nil, fmt.Errorf("%s: input %q has shape %s, the file holds %v%s", flag, vi.Name, probe.ShapeString(vi), t.Shape, hint)
	}
	return c, nil
}

// declaredOK checks that a value made from the declared shape (zeros, a
// number) can be: every dimension but the batch axis is a number.
func (c *constInput) declaredOK(flag string) error {
	if c.vi.Shape == nil {
		if c.spec == "zeros" {
			return fmt.Errorf("%s: input %q has no declared shape; pass a file", flag, c.vi.Name)
		}
		return nil // a scalar
	}
	for i, d := range c.vi.Shape {
		if d < 0 && i != c.axis {
			return fmt.Errorf("%s: input %q has shape %s, whose dimension %d is not a number; pass a file of the shape it should have", flag, c.vi.Name, probe.ShapeString(c.vi), i)
		}
	}
	return nil
}

// at is the tensor fed in a batch of k samples (read-only, made once per k).
func (c *constInput) at(k int) *tensor.Tensor {
	if t, ok := c.byK[k]; ok {
		return t
	}
	var t *tensor.Tensor
	if c.value == nil {
		want := c.vi.DType
		if want == tensor.Float16 || want == tensor.BFloat16 || !c.vi.HasType {
			want = tensor.Float32
		}
		shape := append([]int{}, c.vi.Shape...)
		if c.axis >= 0 {
			shape[c.axis] = k
		}
		t = tensor.New(want, shape)
		fillValue(t, c.fill)
	} else {
		t = c.value
		if c.insert {
			shape := append(append(append([]int{}, t.Shape[:c.axis]...), 1), t.Shape[c.axis:]...)
			t = t.Reshaped(shape)
		}
		if c.axis >= 0 && k != 1 {
			t = spreadAxis(t, c.axis, k, true)
		}
	}
	c.byK[k] = t
	return t
}

func fillValue(t *tensor.Tensor, v float64) {
	switch d := t.Data.(type) {
	case []float32:
		for i := range d {
			d[i] = float32(v)
		}
	case []float64:
		for i := range d {
			d[i] = v
		}
	case []int64:
		for i := range d {
			d[i] = int64(v)
		}
	case []int32:
		for i := range d {
			d[i] = int32(v)
		}
	}
}

// spreadAxis moves or repeats along one axis. With repeat, t has size 1 on
// axis a and the result has k there (the value repeated); without, t has its
// samples on axis 0 (k of them) and the result has them on axis a, the
// other axes in order: with outer the product of the sizes before a (after
// the sample axis is taken out) and inner the product after,
// out[o, b, i] = t[b, o, i].
func spreadAxis(t *tensor.Tensor, a, k int, repeat bool) *tensor.Tensor {
	var rest []int // the shape without the axis
	if repeat {
		rest = append(append([]int{}, t.Shape[:a]...), t.Shape[a+1:]...)
	} else {
		rest = t.Shape[1:]
	}
	outer, inner := 1, 1
	for i, d := range rest {
		if i < a {
			outer *= d
		} else {
			inner *= d
		}
	}
	shape := append(append(append([]int{}, rest[:a]...), k), rest[a:]...)
	out := tensor.New(t.DType, shape)
	src := func(o, b int) int { // start of the inner run of (o, b) in t
		if repeat {
			return o * inner
		}
		return (b*outer + o) * inner
	}
	switch d := t.Data.(type) {
	case []float32:
		spread(out.Data.([]float32), d, outer, k, inner, src)
	case []float64:
		spread(out.Data.([]float64), d, outer, k, inner, src)
	case []int64:
		spread(out.Data.([]int64), d, outer, k, inner, src)
	case []int32:
		spread(out.Data.([]int32), d, outer, k, inner, src)
	case []uint8:
		spread(out.Data.([]uint8), d, outer, k, inner, src)
	case []int8:
		spread(out.Data.([]int8), d, outer, k, inner, src)
	case []bool:
		spread(out.Data.([]bool), d, outer, k, inner, src)
	default:
		panic(fmt.Sprintf("spreadAxis: %v", t.DType))
	}
	return out
}

func spread[T any](dst, src []T, outer, k, inner int, at func(o, b int) int) {
	for o := 0; o < outer; o++ {
		for b := 0; b < k; b++ {
			s := at(o, b)
			copy(dst[(o*k+b)*inner:(o*k+b+1)*inner], src[s:s+inner])
		}
	}
}

// convertTo widens float64 to float32 and int32 to int64 when want is that.
func convertTo(want tensor.DType, t *tensor.Tensor) *tensor.Tensor {
	switch d := t.Data.(type) {
	case []float64:
		if want == tensor.Float32 {
			out := make([]float32, len(d))
			for i, v := range d {
				out[i] = float32(v)
			}
			return tensor.From(out, t.Shape...)
		}
	case []int32:
		if want == tensor.Int64 {
			out := make([]int64, len(d))
			for i, v := range d {
				out[i] = int64(v)
			}
			return tensor.From(out, t.Shape...)
		}
	}
	return t
}

// parseConstSpecs reads Sample.Fixed ("NAME=FILE|VALUE|zeros") and
// Sample.Carry ("OUT=IN") into the spec of every input that is not per
// sample (a carried input without --fixed starts from zeros) and f.carry.
func (f *sampleFeed) parseConstSpecs(g *loader.Graph, o Sample) (map[string]string, error) {
	names := func() string {
		var n []string
		for _, in := range g.Inputs {
			n = append(n, in.Name)
		}
		return strings.Join(n, ", ")
	}
	specs := map[string]string{}
	for _, spec := range o.Fixed {
		name, val, ok := strings.Cut(spec, "=")
		if !ok || name == "" || val == "" {
			return nil, fmt.Errorf("--fixed %q: want NAME=FILE, NAME=VALUE or NAME=zeros", spec)
		}
		if _, in := inputInfo(g, name); !in {
			return nil, fmt.Errorf("--fixed %q: %q is not an input of the model (inputs: %s)", spec, name, names())
		}
		if _, dup := specs[name]; dup {
			return nil, fmt.Errorf("input %q is given twice in --fixed", name)
		}
		specs[name] = val
	}
	carried := map[string]bool{}
	for _, spec := range o.Carry {
		out, in, ok := strings.Cut(spec, "=")
		if !ok || out == "" || in == "" {
			return nil, fmt.Errorf("--carry %q: want OUTPUT=INPUT", spec)
		}
		found := false
		for _, vo := range g.Outputs {
			found = found || vo.Name == out
		}
		if !found {
			var outs []string
			for _, vo := range g.Outputs {
				outs = append(outs, vo.Name)
			}
			return nil, fmt.Errorf("--carry %q: %q is not an output of the model (outputs: %s)", spec, out, strings.Join(outs, ", "))
		}
		if _, isIn := inputInfo(g, in); !isIn {
			return nil, fmt.Errorf("--carry %q: %q is not an input of the model (inputs: %s)", spec, in, names())
		}
		if carried[in] {
			return nil, fmt.Errorf("input %q is carried twice in --carry", in)
		}
		carried[in] = true
		if _, ok := specs[in]; !ok {
			specs[in] = "zeros"
		}
		f.carry = append(f.carry, [2]string{out, in})
	}
	return specs, nil
}
