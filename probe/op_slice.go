package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Slicing and joining: Concat, Split, Slice, Pad. Each is a strided copy
// between views of the input and the output.

func init() {
	reg("Concat", concatKernel, 1, 4, 11, 13)
	reg("Split", splitKernel, 1, 2, 11, 13, 18)
	reg("Slice", sliceKernel, 1, 10, 11, 13)
	reg("Pad", padKernel, 1, 2, 11, 13, 18, 19)
}

// concatKernel joins the inputs along axis; all other dimensions must match.
func concatKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	ins := make([]*tensor.Tensor, 0, len(c.In))
	for i, t := range c.In {
		if t == nil {
			return fmt.Errorf("input %d is missing", i)
		}
		ins = append(ins, t)
	}
	first := ins[0]
	r := first.Rank()
	def := int64(1) // opset 1 defaults the axis to 1
	if c.Opset >= 4 && !c.Has("axis") {
		return fmt.Errorf("attribute axis is missing")
	}
	axis, err := NormAxis(int(c.Int("axis", def)), r)
	if err != nil {
		return err
	}
	shape := append([]int{}, first.Shape...)
	shape[axis] = 0
	for i, t := range ins {
		if t.DType != first.DType {
			return fmt.Errorf("input %d has type %v, input 0 has %v", i, t.DType, first.DType)
		}
		if t.Rank() != r {
			return fmt.Errorf("input %d has shape %v, input 0 has %v", i, t.Shape, first.Shape)
		}
		for a, d := range t.Shape {
			if a != axis && d != first.Shape[a] {
				return fmt.Errorf("input %d has shape %v, input 0 has %v (only axis %d may differ)", i, t.Shape, first.Shape, axis)
			}
		}
		shape[axis] += t.Shape[axis]
	}
	// the inputs cover the output along axis: every element is written
	out, err := shapeNewUninit(c.Arena(), first.DType, shape)
	if err != nil {
		return err
	}
	m, err := shapeOpsFor(first.Data)
	if err != nil {
		return err
	}
	ost := tensor.Strides(shape)
	off := 0
	for _, t := range ins {
		m.strided(out.Data, off*ost[axis], ost, t.Data, 0, tensor.Strides(t.Shape), t.Shape)
		off += t.Shape[axis]
	}
	c.Set(0, out)
	return nil
}

// splitKernel cuts the input along axis into the given part sizes, or into
// equal parts of ceil(d/n) (the last one smaller) for n outputs.
func splitKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	axis, err := NormAxis(int(c.Int("axis", 0)), x.Rank())
	if err != nil {
		return err
	}
	dim := x.Shape[axis]
	var parts []int
	switch {
	case c.Opset >= 13 || (c.Opset < 2 && c.Input(1) != nil):
		p, _, err := shapeIntsInput(c, 1)
		if err != nil {
			return err
		}
		parts = p
	default:
		parts = c.Ints("split")
	}
	if parts == nil {
		n := c.NOut()
		if c.Opset >= 18 && c.Has("num_outputs") {
			n = int(c.Int("num_outputs", 0))
		}
		if n <= 0 {
			return fmt.Errorf("cannot split into %d parts", n)
		}
		if c.Opset < 18 && dim%n != 0 {
			return fmt.Errorf("axis %d of size %d does not split into %d equal parts", axis, dim, n)
		}
		size := (dim + n - 1) / n
		parts = make([]int, n)
		for i := range parts {
			parts[i] = min(size, max(dim-i*size, 0))
		}
	}
	if len(parts) != c.NOut() {
		return fmt.Errorf("split into %d parts but the node has %d outputs", len(parts), c.NOut())
	}
	sum := 0
	for _, p := range parts {
		if p < 0 {
			return fmt.Errorf("negative part size in %v", parts)
		}
		if p > dim {
			// also keeps the sum from wrapping around with INT64_MAX sizes
			return fmt.Errorf("part size %d in %v exceeds axis %d of size %d", p, parts, axis, dim)
		}
		sum += p
	}
	if sum != dim {
		return fmt.Errorf("parts %v do not add up to axis %d of size %d", parts, axis, dim)
	}
	st := tensor.Strides(x.Shape)
	off := 0
	for i, p := range parts {
		dims := append([]int{}, x.Shape...)
		dims[axis] = p
		if c.WantOut(i) {
			out, err := shapeView(c.Arena(), x, off*st[axis], st, dims)
			if err != nil {
				return err
			}
			c.Set(i, out)
		}
		off += p
	}
	return nil
}

// sliceKernel takes x[start:end:step] along the listed axes (attributes before
// opset 10, inputs after). Starts/ends are clamped to the axis as in NumPy.
func sliceKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	r := x.Rank()
	var starts, ends, axes, steps []int
	if c.Opset < 10 {
		starts, ends, axes = c.Ints("starts"), c.Ints("ends"), c.Ints("axes")
	} else {
		var err error
		if err = c.Need(3); err != nil {
			return err
		}
		if starts, _, err = shapeIntsInput(c, 1); err != nil {
			return err
		}
		if ends, _, err = shapeIntsInput(c, 2); err != nil {
			return err
		}
		if axes, _, err = shapeIntsInput(c, 3); err != nil {
			return err
		}
		if steps, _, err = shapeIntsInput(c, 4); err != nil {
			return err
		}
	}
	if len(starts) != len(ends) {
		return fmt.Errorf("starts %v and ends %v differ in length", starts, ends)
	}
	if axes == nil {
		axes = make([]int, len(starts))
		for i := range axes {
			axes[i] = i
		}
	}
	if steps == nil {
		steps = make([]int, len(starts))
		for i := range steps {
			steps[i] = 1
		}
	}
	if len(axes) != len(starts) || len(steps) != len(starts) {
		return fmt.Errorf("starts, ends, axes and steps differ in length")
	}
	axes, err := shapeAxes(axes, r)
	if err != nil {
		return err
	}
	st := tensor.Strides(x.Shape)
	dims := append([]int{}, x.Shape...)
	src := append([]int{}, st...)
	off := 0
	for i, a := range axes {
		d, step := x.Shape[a], steps[i]
		if step == 0 {
			return fmt.Errorf("step is zero on axis %d", a)
		}
		s, e := sliceBound(starts[i], d, step, false), sliceBound(ends[i], d, step, true)
		// n = ⌈|e-s|/|step|⌉ written as ⌊(|e-s|-1)/|step|⌋+1 so that steps of
		// INT64_MAX and INT64_MIN (allowed by the spec) cannot overflow
		n := 0
		if step > 0 && e > s {
			n = int(uint64(e-s-1)/uint64(step)) + 1
		} else if step < 0 && s > e {
			n = int(uint64(s-e-1)/-uint64(step)) + 1
		}
		dims[a] = n
		src[a] = 0 // one element or none: the stride is never used
		if n > 1 {
			src[a] = st[a] * step
		}
		if n > 0 {
			off += s * st[a]
		}
	}
	out, err := shapeView(c.Arena(), x, off, src, dims)
	if err != nil {
		return err
	}
	c.Set(0, out)
	return nil
}

// sliceBound clamps a start (end=false) or end index for an axis of size d:
// negatives count from the end; positive steps clamp to [0, d], negative to [0, d-1] / [-1, d-1].
func sliceBound(v, d, step int, end bool) int {
	if v < 0 {
		v += d
	}
	lo, hi := 0, d
	if step < 0 {
		hi = d - 1
		if end {
			lo = -1
		}
	}
	return min(max(v, lo), hi)
}

// padKernel pads (or, with negative pads, crops) each axis. Modes: constant
// (value), edge (repeat the border), reflect (mirror without the border),
// wrap (periodic). pads = [begin_0.., end_0..] over axes (all axes by default).
func padKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	r := x.Rank()
	mode := c.Str("mode", "constant")
	var pads, axes []int
	var value *tensor.Tensor
	switch {
	case c.Opset < 11:
		pads = c.Ints("pads")
		if c.Opset < 2 {
			pads = c.Ints("paddings")
		}
		v := c.Float("value", 0)
		switch x.DType {
		case tensor.Float32:
			value = tensor.From([]float32{v})
		case tensor.Float64:
			value = tensor.From([]float64{float64(v)})
		}
	default:
		var err error
		if pads, _, err = shapeIntsInput(c, 1); err != nil {
			return err
		}
		value = c.Input(2)
		if value != nil && value.Size() == 0 {
			value = nil
		}
		if value != nil && value.DType != x.DType {
			return fmt.Errorf("constant_value has type %v, data has %v", value.DType, x.DType)
		}
		if c.Opset >= 18 {
			if axes, _, err = shapeIntsInput(c, 3); err != nil {
				return err
			}
		}
	}
	if axes == nil {
		axes = make([]int, r)
		for i := range axes {
			axes[i] = i
		}
	}
	axes, err := shapeAxes(axes, r)
	if err != nil {
		return err
	}
	if len(pads) != 2*len(axes) {
		return fmt.Errorf("pads %v must hold 2 values for each of %d axes", pads, len(axes))
	}
	before, after := make([]int, r), make([]int, r)
	for i, a := range axes {
		before[a], after[a] = pads[i], pads[i+len(axes)]
		// bound each pad so the sums below cannot wrap (INT64_MAX, INT64_MIN)
		for _, p := range []int{before[a], after[a]} {
			if p > tensor.MaxElements || p < -tensor.MaxElements {
				return fmt.Errorf("pad %d on axis %d is beyond ±%d", p, a, tensor.MaxElements)
			}
		}
	}
	// Crop first (negative pads), then pad with the non-negative parts.
	ist := tensor.Strides(x.Shape)
	core := make([]int, r)
	shape := make([]int, r)
	srcOff := 0
	for a := 0; a < r; a++ {
		core[a] = x.Shape[a] + min(before[a], 0) + min(after[a], 0)
		if core[a] < 0 {
			return fmt.Errorf("pads %v crop axis %d of size %d below zero", pads, a, x.Shape[a])
		}
		srcOff += max(-before[a], 0) * ist[a]
		before[a], after[a] = max(before[a], 0), max(after[a], 0)
		shape[a] = core[a] + before[a] + after[a]
	}
	out, err := shapeNew(c.Arena(), x.DType, shape)
	if err != nil {
		return err
	}
	m, err := shapeOpsFor(x.Data)
	if err != nil {
		return err
	}
	ost := tensor.Strides(shape)
	dstOff := 0
	for a := 0; a < r; a++ {
		dstOff += before[a] * ost[a]
	}
	switch mode {
	case "constant":
		if value != nil && out.Size() > 0 {
			m.fill(out.Data, value.Data, 0)
		}
	case "edge", "reflect", "wrap":
	default:
		return fmt.Errorf("unknown mode %q", mode)
	}
	if x.Size() > 0 {
		m.strided(out.Data, dstOff, ost, x.Data, srcOff, ist, core)
	}
	if mode == "constant" {
		c.Set(0, out)
		return nil
	}
	// Fill the borders axis by axis from the interior of the output itself:
	// axes before a are already padded (full extent), axes after a are not yet (core extent).
	for a := 0; a < r; a++ {
		if before[a] == 0 && after[a] == 0 {
			continue
		}
		if core[a] == 0 {
			return fmt.Errorf("cannot %s-pad axis %d of size 0", mode, a)
		}
		dims := make([]int, r)
		base := 0
		for b := 0; b < r; b++ {
			switch {
			case b < a:
				dims[b] = shape[b]
			case b == a:
				dims[b] = 1
			default:
				dims[b] = core[b]
				base += before[b] * ost[b]
			}
		}
		for p := 0; p < shape[a]; p++ {
			i := p - before[a]
			if i >= 0 && i < core[a] {
				continue
			}
			q := padSource(i, core[a], mode)
			m.strided(out.Data, base+p*ost[a], ost, out.Data, base+(before[a]+q)*ost[a], ost, dims)
		}
	}
	c.Set(0, out)
	return nil
}

// padSource maps a position i outside [0, n) to the interior position it copies.
func padSource(i, n int, mode string) int {
	switch mode {
	case "edge":
		return min(max(i, 0), n-1)
	case "wrap":
		return ((i % n) + n) % n
	}
	// reflect: period 2(n-1), mirrored about the border elements
	if n == 1 {
		return 0
	}
	p := 2 * (n - 1)
	i = ((i % p) + p) % p
	if i >= n {
		i = p - i
	}
	return i
}
