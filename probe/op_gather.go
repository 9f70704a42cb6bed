package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Indexing: Gather, GatherElements, GatherND, ScatterElements (and its
// deprecated alias Scatter), ScatterND, OneHot, NonZero. Each kernel turns the
// index tensor into flat offsets, then moves elements with one typed loop.

func init() {
	reg("Gather", gatherKernel, 1, 11, 13)
	reg("GatherElements", gatherElementsKernel, 11, 13)
	reg("GatherND", gatherNDKernel, 11, 12, 13)
	reg("ScatterElements", scatterElementsKernel, 11, 13, 16, 18)
	reg("Scatter", scatterElementsKernel, 9, 11)
	reg("ScatterND", scatterNDKernel, 11, 13, 16, 18)
	reg("OneHot", oneHotKernel, 9, 11)
	reg("NonZero", nonZeroKernel, 9, 13)
}

// gatherIndices reads an index tensor and maps negatives into [0, n), rejecting out-of-range values.
func gatherIndices(t *tensor.Tensor, n int) ([]int, error) {
	switch t.DType {
	case tensor.Int64, tensor.Int32:
	default:
		return nil, fmt.Errorf("indices must be int64 or int32, got %v", t.DType)
	}
	idx := t.Ints()
	for i, v := range idx {
		if v < -n || v >= n {
			return nil, fmt.Errorf("index %d out of range [%d, %d)", v, -n, n)
		}
		if v < 0 {
			idx[i] = v + n
		}
	}
	return idx, nil
}

// gatherKernel: out[a..., i..., b...] = data[a..., indices[i...], b...] along axis.
func gatherKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, it := c.In[0], c.In[1]
	if x.Rank() == 0 {
		return fmt.Errorf("data must have rank >= 1")
	}
	axis, err := NormAxis(int(c.Int("axis", 0)), x.Rank())
	if err != nil {
		return err
	}
	idx, err := gatherIndices(it, x.Shape[axis])
	if err != nil {
		return err
	}
	outer, inner := 1, 1
	for a, d := range x.Shape {
		if a < axis {
			outer *= d
		} else if a > axis {
			inner *= d
		}
	}
	shape := append(append(append([]int{}, x.Shape[:axis]...), it.Shape...), x.Shape[axis+1:]...)
	out, err := shapeNewUninit(c.Arena(), x.DType, shape) // the blocks cover the output
	if err != nil {
		return err
	}
	m, err := shapeOpsFor(x.Data)
	if err != nil {
		return err
	}
	offs := make([]int, 0, outer*len(idx))
	for o := 0; o < outer; o++ {
		for _, v := range idx {
			offs = append(offs, (o*x.Shape[axis]+v)*inner)
		}
	}
	if out.Size() > 0 {
		m.blocks(out.Data, x.Data, offs, inner)
	}
	c.Set(0, out)
	return nil
}

// elementOffsets maps every position p of an index tensor (shape ishape) to the
// flat offset in a tensor of shape dshape of p with its axis coordinate replaced by idx[p].
func elementOffsets(dshape, ishape []int, axis int, idx []int) ([]int, error) {
	if len(dshape) != len(ishape) {
		return nil, fmt.Errorf("indices shape %v and data shape %v differ in rank", ishape, dshape)
	}
	for a, d := range ishape {
		if a != axis && d > dshape[a] {
			return nil, fmt.Errorf("indices shape %v exceeds data shape %v on axis %d", ishape, dshape, a)
		}
	}
	n := len(idx)
	offs := make([]int, n)
	if n == 0 {
		return offs, nil
	}
	ds := tensor.Strides(dshape)
	r := len(ishape)
	pos := make([]int, r)
	base := 0 // Σ_{a≠axis} pos[a]·ds[a]
	for i := 0; i < n; i++ {
		offs[i] = base + idx[i]*ds[axis]
		for a := r - 1; a >= 0; a-- {
			pos[a]++
			if a != axis {
				base += ds[a]
			}
			if pos[a] < ishape[a] {
				break
			}
			if a != axis {
				base -= ds[a] * ishape[a]
			}
			pos[a] = 0
		}
	}
	return offs, nil
}

// gatherElementsKernel: out[p] = data[p with p[axis] = indices[p]]; out has the indices' shape.
func gatherElementsKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, it := c.In[0], c.In[1]
	axis, err := NormAxis(int(c.Int("axis", 0)), x.Rank())
	if err != nil {
		return err
	}
	idx, err := gatherIndices(it, x.Shape[axis])
	if err != nil {
		return err
	}
	offs, err := elementOffsets(x.Shape, it.Shape, axis, idx)
	if err != nil {
		return err
	}
	out, err := shapeNew(c.Arena(), x.DType, it.Shape)
	if err != nil {
		return err
	}
	m, err := shapeOpsFor(x.Data)
	if err != nil {
		return err
	}
	m.take(out.Data, x.Data, offs)
	c.Set(0, out)
	return nil
}

// scatterElementsKernel: out = data; out[p with p[axis] = indices[p]] (op)= updates[p],
// where op is the reduction (none, add, mul, max, min).
func scatterElementsKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	x, it, u := c.In[0], c.In[1], c.In[2]
	if u.DType != x.DType || !tensor.SameShape(u.Shape, it.Shape) {
		return fmt.Errorf("updates %v must match indices shape %v and data type %v", u, it.Shape, x.DType)
	}
	axis, err := NormAxis(int(c.Int("axis", 0)), x.Rank())
	if err != nil {
		return err
	}
	idx, err := gatherIndices(it, x.Shape[axis])
	if err != nil {
		return err
	}
	offs, err := elementOffsets(x.Shape, it.Shape, axis, idx)
	if err != nil {
		return err
	}
	out, err := scatterApply(x, u, offs, c.Str("reduction", "none"))
	if err != nil {
		return err
	}
	c.Set(0, out)
	return nil
}

// scatterApply copies data and writes (or reduces) updates[i] into offset offs[i].
func scatterApply(x, u *tensor.Tensor, offs []int, reduction string) (*tensor.Tensor, error) {
	out := x.Clone()
	if reduction == "none" {
		m, err := shapeOpsFor(x.Data)
		if err != nil {
			return nil, err
		}
		m.put(out.Data, u.Data, offs)
		return out, nil
	}
	n, err := shapeNumFor(x.Data)
	if err != nil {
		return nil, err
	}
	if err := n.scatter(out.Data, u.Data, offs, reduction); err != nil {
		return nil, err
	}
	return out, nil
}

// ndOffsets turns index tuples (the last axis of indices, length k) into flat offsets of
// blocks in data, with the first b axes of indices and data as batch axes.
// It returns the offsets, the block size and the block shape.
func ndOffsets(dshape []int, it *tensor.Tensor, b int) ([]int, int, []int, error) {
	q := it.Rank()
	if q < 1 {
		return nil, 0, nil, fmt.Errorf("indices must have rank >= 1")
	}
	k := it.Shape[q-1]
	r := len(dshape)
	if b < 0 || b >= q || b >= r {
		return nil, 0, nil, fmt.Errorf("batch_dims %d is out of range for indices rank %d and data rank %d", b, q, r)
	}
	if k < 1 || b+k > r {
		return nil, 0, nil, fmt.Errorf("index tuples of length %d do not fit data shape %v after %d batch axes", k, dshape, b)
	}
	for a := 0; a < b; a++ {
		if it.Shape[a] != dshape[a] {
			return nil, 0, nil, fmt.Errorf("batch axis %d: indices %v and data %v differ", a, it.Shape, dshape)
		}
	}
	switch it.DType {
	case tensor.Int64, tensor.Int32:
	default:
		return nil, 0, nil, fmt.Errorf("indices must be int64 or int32, got %v", it.DType)
	}
	raw := it.Ints()
	ds := tensor.Strides(dshape)
	block := dshape[b+k:]
	size := 1
	for _, d := range block {
		size *= d
	}
	batch, batchStride := 1, 1
	for a := 0; a < r; a++ {
		if a < b {
			batch *= dshape[a]
		} else {
			batchStride *= dshape[a]
		}
	}
	tuples := len(raw) / k
	perBatch := 0
	if batch > 0 {
		perBatch = tuples / batch
	}
	offs := make([]int, tuples)
	for t := range offs {
		o := 0
		if perBatch > 0 {
			o = (t / perBatch) * batchStride
		}
		for j := 0; j < k; j++ {
			v, d := raw[t*k+j], dshape[b+j]
			if v < -d || v >= d {
				return nil, 0, nil, fmt.Errorf("index %d out of range [%d, %d) on data axis %d", v, -d, d, b+j)
			}
			if v < 0 {
				v += d
			}
			o += v * ds[b+j]
		}
		offs[t] = o
	}
	return offs, size, block, nil
}

// gatherNDKernel: out[i..., :] = data[batch..., indices[i...], :] (slices addressed by index tuples).
func gatherNDKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, it := c.In[0], c.In[1]
	offs, size, block, err := ndOffsets(x.Shape, it, int(c.Int("batch_dims", 0)))
	if err != nil {
		return err
	}
	shape := append(append([]int{}, it.Shape[:it.Rank()-1]...), block...)
	out, err := shapeNew(c.Arena(), x.DType, shape)
	if err != nil {
		return err
	}
	m, err := shapeOpsFor(x.Data)
	if err != nil {
		return err
	}
	if out.Size() > 0 {
		m.blocks(out.Data, x.Data, offs, size)
	}
	c.Set(0, out)
	return nil
}

// scatterNDKernel: out = data; out[indices[i...], :] (op)= updates[i..., :].
func scatterNDKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	x, it, u := c.In[0], c.In[1], c.In[2]
	offs, size, block, err := ndOffsets(x.Shape, it, 0)
	if err != nil {
		return err
	}
	want := append(append([]int{}, it.Shape[:it.Rank()-1]...), block...)
	if u.DType != x.DType || !tensor.SameShape(u.Shape, want) {
		return fmt.Errorf("updates %v must have shape %v and type %v", u, want, x.DType)
	}
	all := make([]int, 0, len(offs)*size)
	for _, o := range offs {
		for j := 0; j < size; j++ {
			all = append(all, o+j)
		}
	}
	out, err := scatterApply(x, u, all, c.Str("reduction", "none"))
	if err != nil {
		return err
	}
	c.Set(0, out)
	return nil
}

// oneHotKernel: out[..., j, ...] = values[1] where j = indices[...] (negatives count from depth),
// values[0] elsewhere; the depth axis is inserted at axis (default -1, last).
func oneHotKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	it, dt, vals := c.In[0], c.In[1], c.In[2]
	if vals.Size() != 2 {
		return fmt.Errorf("values must hold [off, on], has shape %v", vals.Shape)
	}
	if dt.Size() != 1 {
		return fmt.Errorf("depth must be a scalar, has shape %v", dt.Shape)
	}
	depth := int(dt.Int64At(0)) // exact for integer depths; a float depth truncates
	if depth < 1 || depth > tensor.MaxElements {
		return fmt.Errorf("depth %d must be in [1, %d]", depth, tensor.MaxElements)
	}
	r := it.Rank() + 1
	axis := int(c.Int("axis", -1))
	if axis < 0 {
		axis += r
	}
	if axis < 0 || axis >= r {
		return fmt.Errorf("axis %d out of range for output rank %d", c.Int("axis", -1), r)
	}
	shape := append(append(append([]int{}, it.Shape[:axis]...), depth), it.Shape[axis:]...)
	out, err := shapeNew(c.Arena(), vals.DType, shape)
	if err != nil {
		return err
	}
	m, err := shapeOpsFor(vals.Data)
	if err != nil {
		return err
	}
	m.fill(out.Data, vals.Data, 0)
	inner := 1
	for _, d := range it.Shape[axis:] {
		inner *= d
	}
	idx := it.Ints()
	offs := make([]int, 0, len(idx))
	for p, v := range idx {
		if v < 0 {
			v += depth
		}
		if v < 0 || v >= depth {
			continue // out-of-range indices leave the row at the off value
		}
		o, i := p/inner, p%inner
		offs = append(offs, (o*depth+v)*inner+i)
	}
	m.putAt(out.Data, vals.Data, 1, offs)
	c.Set(0, out)
	return nil
}

// nonZeroKernel returns the coordinates of the non-zero elements as int64[rank, count], in row-major order.
func nonZeroKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	m, err := shapeOpsFor(x.Data)
	if err != nil {
		return err
	}
	pos := m.nonzero(x.Data)
	r, n := x.Rank(), len(pos)
	if r == 0 {
		c.Set(0, tensor.From(make([]int64, n), 1, n))
		return nil
	}
	out := make([]int64, r*n)
	st := tensor.Strides(x.Shape)
	for j, p := range pos {
		for a := 0; a < r; a++ {
			out[a*n+j] = int64(p / st[a])
			p %= st[a]
		}
	}
	c.Set(0, tensor.From(out, r, n))
	return nil
}
