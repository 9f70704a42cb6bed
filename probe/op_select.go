package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Selection along one axis: ReverseSequence and Compress. Both build the
// source offset of every output block and move the blocks with the typed
// mover, so they work for every element type (strings and bools included).
//
//	ReverseSequence: Y[b, t, …] = X[b, L_b−1−t, …] for t < L_b, X[b, t, …] otherwise
//	                 (b on batch_axis, t on time_axis, L = sequence_lens);
//	Compress:        Y = X[…, {j : condition[j]}, …] along axis (on the flattened X
//	                 when axis is absent); condition may be shorter than the axis.

func init() {
	reg("ReverseSequence", reverseSequenceKernel, 10)
	reg("Compress", compressKernel, 9, 11)
}

func reverseSequenceKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, lt := c.In[0], c.In[1]
	if x.Rank() < 2 {
		return fmt.Errorf("input must have rank >= 2, got shape %v", x.Shape)
	}
	batchAxis, timeAxis := int(c.Int("batch_axis", 1)), int(c.Int("time_axis", 0))
	if (batchAxis != 0 && batchAxis != 1) || (timeAxis != 0 && timeAxis != 1) || batchAxis == timeAxis {
		return fmt.Errorf("batch_axis %d and time_axis %d must be 0 and 1 in some order", batchAxis, timeAxis)
	}
	switch lt.DType {
	case tensor.Int64, tensor.Int32:
	default:
		return fmt.Errorf("sequence_lens must be int64 (or int32), got %v", lt.DType)
	}
	B, T := x.Shape[batchAxis], x.Shape[timeAxis]
	if lt.Rank() != 1 || lt.Shape[0] != B {
		return fmt.Errorf("sequence_lens must have shape [%d] (batch axis %d of input %v), got %v", B, batchAxis, x.Shape, lt.Shape)
	}
	lens := lt.Ints()
	for b, l := range lens {
		if l < 0 || l > T {
			return fmt.Errorf("sequence_lens[%d] = %d is outside [0, %d] (time axis %d of input %v)", b, l, T, timeAxis, x.Shape)
		}
	}
	out, err := shapeNew(c.Arena(), x.DType, x.Shape)
	if err != nil {
		return err
	}
	if out.Size() == 0 {
		c.Set(0, out)
		return nil
	}
	m, err := shapeOpsFor(x.Data)
	if err != nil {
		return err
	}
	inner := 1
	for _, d := range x.Shape[2:] {
		inner *= d
	}
	A0, A1 := x.Shape[0], x.Shape[1]
	offs := make([]int, 0, A0*A1)
	for i0 := 0; i0 < A0; i0++ {
		for i1 := 0; i1 < A1; i1++ {
			b, t := i0, i1
			if batchAxis == 1 {
				b, t = i1, i0
			}
			if t < lens[b] {
				t = lens[b] - 1 - t
			}
			s0, s1 := b, t
			if batchAxis == 1 {
				s0, s1 = t, b
			}
			offs = append(offs, (s0*A1+s1)*inner)
		}
	}
	m.blocks(out.Data, x.Data, offs, inner)
	c.Set(0, out)
	return nil
}

func compressKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, ct := c.In[0], c.In[1]
	if ct.Rank() != 1 {
		return fmt.Errorf("condition must be 1-D, got shape %v", ct.Shape)
	}
	if ct.DType == tensor.String {
		return fmt.Errorf("condition must be bool, got %v", ct.DType)
	}
	m, err := shapeOpsFor(x.Data)
	if err != nil {
		return err
	}
	if !c.Has("axis") {
		n := x.Size()
		if ct.Size() > n {
			return fmt.Errorf("condition has %d entries, more than the %d elements of the flattened input %v", ct.Size(), n, x.Shape)
		}
		sel := compressPicks(ct)
		out, err := shapeNew(c.Arena(), x.DType, []int{len(sel)})
		if err != nil {
			return err
		}
		m.take(out.Data, x.Data, sel)
		c.Set(0, out)
		return nil
	}
	if x.Rank() == 0 {
		return fmt.Errorf("input must have rank >= 1 when axis is given")
	}
	axis, err := NormAxis(int(c.Int("axis", 0)), x.Rank())
	if err != nil {
		return err
	}
	outer, n, inner := orderLanes(x.Shape, axis)
	if ct.Size() > n {
		return fmt.Errorf("condition has %d entries, more than the %d of axis %d of input %v", ct.Size(), n, axis, x.Shape)
	}
	sel := compressPicks(ct)
	shape := append([]int{}, x.Shape...)
	shape[axis] = len(sel)
	out, err := shapeNew(c.Arena(), x.DType, shape)
	if err != nil {
		return err
	}
	if out.Size() > 0 {
		offs := make([]int, 0, outer*len(sel))
		for o := 0; o < outer; o++ {
			for _, j := range sel {
				offs = append(offs, (o*n+j)*inner)
			}
		}
		m.blocks(out.Data, x.Data, offs, inner)
	}
	c.Set(0, out)
	return nil
}

// compressPicks lists the positions where the condition is true (non-zero).
func compressPicks(ct *tensor.Tensor) []int {
	var sel []int
	if b, ok := ct.Data.([]bool); ok {
		for j, v := range b {
			if v {
				sel = append(sel, j)
			}
		}
		return sel
	}
	for j := 0; j < ct.Size(); j++ {
		if ct.Float64At(j) != 0 {
			sel = append(sel, j)
		}
	}
	return sel
}
