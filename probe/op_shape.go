package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Shape manipulation: Reshape, Flatten, Squeeze, Unsqueeze, Transpose, Expand,
// Tile, Shape, Size, Constant, ConstantOfShape, Range, EyeLike, Trilu,
// DepthToSpace, SpaceToDepth. Pure re-shapes share the input's data.

func init() {
	reg("Reshape", reshapeKernel, 1, 5, 14)
	reg("Flatten", flattenKernel, 1, 9, 11)
	reg("Squeeze", squeezeKernel, 1, 11, 13)
	reg("Unsqueeze", unsqueezeKernel, 1, 11, 13)
	reg("Transpose", transposeKernel, 1)
	reg("Expand", expandKernel, 8)
	reg("Tile", tileKernel, 1, 6)
	reg("Shape", shapeKernel, 1, 15)
	reg("Size", sizeKernel, 1)
	reg("Constant", constantKernel, 1, 9, 11, 12)
	reg("ConstantOfShape", constantOfShapeKernel, 9)
	reg("Range", rangeKernel, 11)
	reg("EyeLike", eyeLikeKernel, 9)
	reg("Trilu", triluKernel, 14)
	reg("DepthToSpace", depthToSpaceKernel, 1, 11)
	reg("SpaceToDepth", spaceToDepthKernel, 1)
}

// reshapeKernel: the new shape comes from the "shape" attribute (opset < 5) or
// input 1; a 0 copies the input's dimension (unless allowzero=1), one -1 is inferred.
func reshapeKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	var want []int
	if c.Opset < 5 {
		want = c.Ints("shape")
	} else {
		s, ok, err := shapeIntsInput(c, 1)
		if err != nil {
			return err
		}
		if !ok {
			return fmt.Errorf("input 1 (shape) is missing")
		}
		want = s
	}
	shape, err := shapeResolve(x.Shape, want, c.Int("allowzero", 0) == 1)
	if err != nil {
		return err
	}
	c.Set(0, x.Reshaped(shape))
	return nil
}

// shapeResolve applies Reshape's 0 and -1 rules to want for an input of shape in.
func shapeResolve(in, want []int, allowZero bool) ([]int, error) {
	total, _ := tensor.NumElements(in)
	out := make([]int, len(want))
	infer := -1
	known := 1
	for i, d := range want {
		switch {
		case d == -1:
			if infer >= 0 {
				return nil, fmt.Errorf("shape %v has more than one -1", want)
			}
			infer = i
			continue
		case d == 0 && !allowZero:
			if i >= len(in) {
				return nil, fmt.Errorf("shape %v copies dimension %d, but the input %v has rank %d", want, i, in, len(in))
			}
			d = in[i]
		case d < 0:
			return nil, fmt.Errorf("shape %v has invalid dimension %d", want, d)
		}
		out[i] = d
		if d != 0 && known > tensor.MaxElements/d {
			// a product that would wrap (INT64_MAX dims) must not come back as a valid count
			return nil, fmt.Errorf("shape %v has more than %d elements", want, tensor.MaxElements)
		}
		known *= d
	}
	if infer >= 0 {
		if known == 0 {
			if total != 0 {
				return nil, fmt.Errorf("cannot infer -1 in shape %v for input %v", want, in)
			}
			out[infer] = 0
			return out, nil
		}
		if total%known != 0 {
			return nil, fmt.Errorf("cannot reshape %v (%d elements) to %v", in, total, want)
		}
		out[infer] = total / known
		known = total
	}
	if known != total {
		return nil, fmt.Errorf("cannot reshape %v (%d elements) to %v (%d elements)", in, total, out, known)
	}
	return out, nil
}

// flattenKernel reshapes to [∏ d[:axis], ∏ d[axis:]].
func flattenKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	r := x.Rank()
	axis := int(c.Int("axis", 1))
	if axis < 0 {
		axis += r
	}
	if axis < 0 || axis > r {
		return fmt.Errorf("axis %d out of range for rank %d", c.Int("axis", 1), r)
	}
	a, b := 1, 1
	for i, d := range x.Shape {
		if i < axis {
			a *= d
		} else {
			b *= d
		}
	}
	c.Set(0, x.Reshaped([]int{a, b}))
	return nil
}

// shapeAxesArg reads axes from the attribute (opset < since) or input 1.
func shapeAxesArg(c *Call, since int) ([]int, bool, error) {
	if c.Opset < since {
		return c.Ints("axes"), c.Has("axes"), nil
	}
	return shapeIntsInput(c, 1)
}

// squeezeKernel removes the listed unit axes, or every unit axis when none are given.
func squeezeKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	axes, ok, err := shapeAxesArg(c, 13)
	if err != nil {
		return err
	}
	drop := make([]bool, x.Rank())
	if !ok {
		for i, d := range x.Shape {
			drop[i] = d == 1
		}
	} else {
		ax, err := shapeAxes(axes, x.Rank())
		if err != nil {
			return err
		}
		for _, a := range ax {
			if x.Shape[a] != 1 {
				return fmt.Errorf("cannot squeeze axis %d of shape %v: size is not 1", a, x.Shape)
			}
			drop[a] = true
		}
	}
	shape := []int{}
	for i, d := range x.Shape {
		if !drop[i] {
			shape = append(shape, d)
		}
	}
	c.Set(0, x.Reshaped(shape))
	return nil
}

// unsqueezeKernel inserts unit axes at the listed positions of the output.
func unsqueezeKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	axes, ok, err := shapeAxesArg(c, 13)
	if err != nil {
		return err
	}
	if !ok {
		return fmt.Errorf("axes are missing")
	}
	r := x.Rank() + len(axes)
	ax, err := shapeAxes(axes, r)
	if err != nil {
		return err
	}
	ins := make([]bool, r)
	for _, a := range ax {
		ins[a] = true
	}
	shape := make([]int, 0, r)
	k := 0
	for i := 0; i < r; i++ {
		if ins[i] {
			shape = append(shape, 1)
		} else {
			shape = append(shape, x.Shape[k])
			k++
		}
	}
	c.Set(0, x.Reshaped(shape))
	return nil
}

// transposeKernel: out.shape[i] = in.shape[perm[i]] (perm defaults to reversed axes).
func transposeKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	r := x.Rank()
	perm := c.Ints("perm")
	if perm == nil {
		perm = make([]int, r)
		for i := range perm {
			perm[i] = r - 1 - i
		}
	}
	if len(perm) != r {
		return fmt.Errorf("perm %v does not match rank %d", perm, r)
	}
	perm, err := shapeAxes(perm, r)
	if err != nil {
		return fmt.Errorf("perm %v: %w", c.Ints("perm"), err)
	}
	st := tensor.Strides(x.Shape)
	dims := make([]int, r)
	src := make([]int, r)
	for i, p := range perm {
		dims[i] = x.Shape[p]
		src[i] = st[p]
	}
	out, err := shapeView(c.Arena(), x, 0, src, dims)
	if err != nil {
		return err
	}
	c.Set(0, out)
	return nil
}

// expandKernel broadcasts the input to Broadcast(input.shape, shape).
func expandKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x := c.In[0]
	want, _, err := shapeIntsInput(c, 1)
	if err != nil {
		return err
	}
	shape, err := Broadcast(x.Shape, want)
	if err != nil {
		return err
	}
	out, err := shapeView(c.Arena(), x, 0, BroadcastStrides(x.Shape, shape), shape)
	if err != nil {
		return err
	}
	c.Set(0, out)
	return nil
}

// tileKernel repeats the input repeats[i] times along axis i:
// out[a_i·d_i + b_i] = in[b_i], viewed as an expand over interleaved [r_i, d_i] axes.
func tileKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x := c.In[0]
	reps, _, err := shapeIntsInput(c, 1)
	if err != nil {
		return err
	}
	r := x.Rank()
	if len(reps) != r {
		return fmt.Errorf("repeats %v do not match rank %d", reps, r)
	}
	shape := make([]int, r)
	for i, n := range reps {
		if n < 0 {
			return fmt.Errorf("negative repeat %d", n)
		}
		if n != 0 && x.Shape[i] > tensor.MaxElements/n {
			return fmt.Errorf("repeats %v make axis %d of size %d longer than %d", reps, i, x.Shape[i], tensor.MaxElements)
		}
		shape[i] = x.Shape[i] * n
	}
	out, err := shapeNewUninit(c.Arena(), x.DType, shape) // every element is copied
	if err != nil {
		return err
	}
	m, err := shapeOpsFor(x.Data)
	if err != nil {
		return err
	}
	ost, ist := tensor.Strides(shape), tensor.Strides(x.Shape)
	dims := make([]int, 0, 2*r)
	dst := make([]int, 0, 2*r)
	src := make([]int, 0, 2*r)
	for i := 0; i < r; i++ {
		dims = append(dims, reps[i], x.Shape[i])
		dst = append(dst, x.Shape[i]*ost[i], ost[i])
		src = append(src, 0, ist[i])
	}
	m.strided(out.Data, 0, dst, x.Data, 0, src, dims)
	c.Set(0, out)
	return nil
}

// shapeKernel returns the input's shape as int64[], sliced to [start, end) from opset 15.
func shapeKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	r := x.Rank()
	clip := func(v int) int {
		if v < 0 {
			v += r
		}
		return min(max(v, 0), r)
	}
	start, end := clip(int(c.Int("start", 0))), clip(int(c.Int("end", int64(r))))
	end = max(end, start)
	out := make([]int64, 0, end-start)
	for _, d := range x.Shape[start:end] {
		out = append(out, int64(d))
	}
	c.Set(0, tensor.From(out, len(out)))
	return nil
}

// sizeKernel returns the element count as an int64 scalar.
func sizeKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	c.Set(0, tensor.From([]int64{int64(c.In[0].Size())}))
	return nil
}

// constantKernel returns the value held by exactly one of its attributes.
func constantKernel(c *Call) error {
	switch {
	case c.Has("value"):
		t := c.Attr("value").T
		if t == nil {
			return fmt.Errorf("attribute value holds no tensor")
		}
		c.Set(0, t)
	case c.Has("value_float"):
		c.Set(0, tensor.From([]float32{c.Float("value_float", 0)}))
	case c.Has("value_floats"):
		v := append([]float32{}, c.Floats("value_floats")...)
		c.Set(0, tensor.From(v, len(v)))
	case c.Has("value_int"):
		c.Set(0, tensor.From([]int64{c.Int("value_int", 0)}))
	case c.Has("value_ints"):
		v := append([]int64{}, c.Attr("value_ints").Ints...)
		c.Set(0, tensor.From(v, len(v)))
	case c.Has("value_string"):
		c.Set(0, tensor.From([]string{c.Str("value_string", "")}))
	case c.Has("value_strings"):
		v := append([]string{}, c.Attr("value_strings").Strings...)
		c.Set(0, tensor.From(v, len(v)))
	case c.Has("sparse_value"):
		return fmt.Errorf("sparse_value constants are not supported")
	default:
		return fmt.Errorf("no value attribute")
	}
	return nil
}

// constantOfShapeKernel fills a tensor of the given shape with the one-element "value" (default float32 0).
func constantOfShapeKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	shape, _, err := shapeIntsInput(c, 0)
	if err != nil {
		return err
	}
	val := tensor.From([]float32{0})
	if a := c.Attr("value"); a != nil && a.T != nil {
		val = a.T
	}
	if val.Size() != 1 {
		return fmt.Errorf("value must hold one element, has shape %v", val.Shape)
	}
	out, err := shapeNew(c.Arena(), val.DType, shape)
	if err != nil {
		return err
	}
	m, err := shapeOpsFor(val.Data)
	if err != nil {
		return err
	}
	m.fill(out.Data, val.Data, 0)
	c.Set(0, out)
	return nil
}

// rangeKernel: out[i] = start + i·delta for i < max(ceil((limit-start)/delta), 0).
func rangeKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	s, l, d := c.In[0], c.In[1], c.In[2]
	if s.DType != l.DType || s.DType != d.DType {
		return fmt.Errorf("start, limit and delta types differ: %v, %v, %v", s.DType, l.DType, d.DType)
	}
	if s.Size() != 1 || l.Size() != 1 || d.Size() != 1 {
		return fmt.Errorf("start, limit and delta must be scalars")
	}
	switch v := s.Data.(type) {
	case []float32:
		return rangeFill(c, v[0], l.F32()[0], d.F32()[0])
	case []float64:
		return rangeFill(c, v[0], l.F64()[0], d.F64()[0])
	case []int64:
		return rangeFillInt(c, v[0], l.I64()[0], d.I64()[0])
	case []int32:
		return rangeFillInt(c, v[0], l.Data.([]int32)[0], d.Data.([]int32)[0])
	case []int16:
		return rangeFillInt(c, v[0], l.Data.([]int16)[0], d.Data.([]int16)[0])
	}
	return fmt.Errorf("unsupported type %v", s.DType)
}

// rangeFillInt is Range for integer types, counted exactly in unsigned
// 64-bit arithmetic: n = ⌊(|limit-start|-1)/|delta|⌋+1 when delta points from
// start toward limit, else 0. Through float64, int64 bounds beyond 2^53
// (INT64_MAX, INT64_MIN) would round and give a wrong length.
func rangeFillInt[T int64 | int32 | int16](c *Call, start, limit, delta T) error {
	if delta == 0 {
		return fmt.Errorf("delta is zero")
	}
	var n uint64
	s, l, d := int64(start), int64(limit), int64(delta)
	switch {
	case d > 0 && l > s:
		n = (uint64(l)-uint64(s)-1)/uint64(d) + 1
	case d < 0 && l < s:
		n = (uint64(s)-uint64(l)-1)/(-uint64(d)) + 1
	}
	if n > tensor.MaxElements {
		return fmt.Errorf("range from %v to %v by %v has %d elements, more than %d", start, limit, delta, n, uint64(tensor.MaxElements))
	}
	out := makeChecked[T](c.Arena(), int(n))
	v := start
	for i := range out {
		out[i] = v
		v += delta // wraps only after the last element, which is never stored
	}
	c.Set(0, tensor.From(out, len(out)))
	return nil
}

func rangeFill[T Number](c *Call, start, limit, delta T) error {
	if delta == 0 {
		return fmt.Errorf("delta is zero")
	}
	n := math.Ceil((float64(limit) - float64(start)) / float64(delta))
	if math.IsNaN(n) || n > tensor.MaxElements {
		return fmt.Errorf("range from %v to %v by %v has no valid length", start, limit, delta)
	}
	n = max(n, 0)
	out := makeChecked[T](c.Arena(), int(n))
	v := start
	for i := range out {
		out[i] = v
		v += delta
	}
	c.Set(0, tensor.From(out, len(out)))
	return nil
}

// eyeLikeKernel: a 2-D tensor shaped like the input with ones on diagonal k (j - i = k).
func eyeLikeKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	if x.Rank() != 2 {
		return fmt.Errorf("input must be 2-D, got shape %v", x.Shape)
	}
	dt := x.DType
	if c.Has("dtype") {
		dt = tensor.DType(c.Int("dtype", 0))
	}
	if dt == tensor.Float16 || dt == tensor.BFloat16 {
		dt = tensor.Float32 // half types are computed widened, as on load
	}
	if !dt.Supported() {
		return fmt.Errorf("unsupported dtype %v", dt)
	}
	out := c.Arena().New(dt, x.Shape)
	rows, cols, k := x.Shape[0], x.Shape[1], int(c.Int("k", 0))
	switch d := out.Data.(type) {
	case []float32:
		shapeDiag(d, rows, cols, k, 1)
	case []float64:
		shapeDiag(d, rows, cols, k, 1)
	case []int64:
		shapeDiag(d, rows, cols, k, 1)
	case []int32:
		shapeDiag(d, rows, cols, k, 1)
	case []int16:
		shapeDiag(d, rows, cols, k, 1)
	case []int8:
		shapeDiag(d, rows, cols, k, 1)
	case []uint8:
		shapeDiag(d, rows, cols, k, 1)
	case []uint16:
		shapeDiag(d, rows, cols, k, 1)
	case []uint32:
		shapeDiag(d, rows, cols, k, 1)
	case []uint64:
		shapeDiag(d, rows, cols, k, 1)
	case []bool:
		shapeDiag(d, rows, cols, k, true)
	default:
		return fmt.Errorf("unsupported dtype %v", dt)
	}
	c.Set(0, out)
	return nil
}

func shapeDiag[T any](d []T, rows, cols, k int, one T) {
	for i := 0; i < rows; i++ {
		if j := i + k; j >= 0 && j < cols {
			d[i*cols+j] = one
		}
	}
}

// triluKernel keeps the upper (j-i >= k) or lower (j-i <= k) triangle of each trailing matrix.
func triluKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	if x.Rank() < 2 {
		return fmt.Errorf("input must have rank >= 2, got shape %v", x.Shape)
	}
	k := 0
	if t := c.Input(1); t != nil {
		v, err := ScalarInt(t)
		if err != nil {
			return fmt.Errorf("k: %w", err)
		}
		k = v
	}
	m, err := shapeOpsFor(x.Data)
	if err != nil {
		return err
	}
	out := x.Clone()
	r := x.Rank()
	m.triZero(out.Data, x.Shape[r-2], x.Shape[r-1], k, c.Int("upper", 1) == 1)
	c.Set(0, out)
	return nil
}

// depthToSpaceKernel moves blocks of channels into b×b spatial blocks:
// DCR views [N,b,b,C',H,W] as [N,C',H,b,W,b]; CRD views [N,C',b,b,H,W] the same way.
func depthToSpaceKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	b := int(c.Int("blocksize", 0))
	if x.Rank() != 4 || b <= 0 || x.Shape[1]%(b*b) != 0 {
		return fmt.Errorf("needs a 4-D input with channels divisible by blocksize² (shape %v, blocksize %d)", x.Shape, b)
	}
	n, ch, h, w := x.Shape[0], x.Shape[1]/(b*b), x.Shape[2], x.Shape[3]
	var in, perm []int
	if c.Str("mode", "DCR") == "CRD" {
		in, perm = []int{n, ch, b, b, h, w}, []int{0, 1, 4, 2, 5, 3}
	} else {
		in, perm = []int{n, b, b, ch, h, w}, []int{0, 3, 4, 1, 5, 2}
	}
	out, err := shapePermute(c.Arena(), x, in, perm)
	if err != nil {
		return err
	}
	c.Set(0, out.Reshaped([]int{n, ch, h * b, w * b}))
	return nil
}

// spaceToDepthKernel is the inverse of DepthToSpace (DCR): [N,C,H/b,b,W/b,b] → [N,b,b,C,H/b,W/b].
func spaceToDepthKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	b := int(c.Int("blocksize", 0))
	if x.Rank() != 4 || b <= 0 || x.Shape[2]%b != 0 || x.Shape[3]%b != 0 {
		return fmt.Errorf("needs a 4-D input with spatial dims divisible by blocksize (shape %v, blocksize %d)", x.Shape, b)
	}
	n, ch, h, w := x.Shape[0], x.Shape[1], x.Shape[2]/b, x.Shape[3]/b
	out, err := shapePermute(c.Arena(), x, []int{n, ch, h, b, w, b}, []int{0, 3, 5, 1, 2, 4})
	if err != nil {
		return err
	}
	c.Set(0, out.Reshaped([]int{n, ch * b * b, h, w}))
	return nil
}

// shapePermute views x's data as shape in and transposes it by perm into a new tensor.
func shapePermute(ar *tensor.Arena, x *tensor.Tensor, in, perm []int) (*tensor.Tensor, error) {
	st := tensor.Strides(in)
	dims := make([]int, len(perm))
	src := make([]int, len(perm))
	for i, p := range perm {
		dims[i] = in[p]
		src[i] = st[p]
	}
	return shapeView(ar, x, 0, src, dims)
}
