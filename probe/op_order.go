package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Order-dependent kernels along one axis: TopK and CumSum.

func init() {
	reg("TopK", topKKernel, 1, 10, 11)
	reg("CumSum", cumSumKernel, 11, 14)
}

// orderLanes splits shape around axis into outer × n × inner.
func orderLanes(shape []int, axis int) (outer, n, inner int) {
	outer, inner = 1, 1
	for a, d := range shape {
		switch {
		case a < axis:
			outer *= d
		case a > axis:
			inner *= d
		}
	}
	return outer, shape[axis], inner
}

// topKKernel returns the k largest (largest=1) or smallest elements along axis
// (default -1), sorted, with their int64 positions; equal values keep index order.
// k is an attribute before opset 10 and input 1 after.
func topKKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	if x.Rank() == 0 {
		return fmt.Errorf("input must have rank >= 1")
	}
	axis, err := NormAxis(int(c.Int("axis", -1)), x.Rank())
	if err != nil {
		return err
	}
	k := int(c.Int("k", 0))
	if c.Opset >= 10 {
		if err := c.Need(2); err != nil {
			return err
		}
		if k, err = ScalarInt(c.In[1]); err != nil {
			return fmt.Errorf("k: %w", err)
		}
	}
	outer, n, inner := orderLanes(x.Shape, axis)
	if k < 0 || k > n {
		return fmt.Errorf("k = %d is outside [0, %d] for axis %d of shape %v", k, n, axis, x.Shape)
	}
	num, err := shapeNumFor(x.Data)
	if err != nil {
		return err
	}
	shape := append([]int{}, x.Shape...)
	shape[axis] = k
	vals, err := shapeNew(c.Arena(), x.DType, shape)
	if err != nil {
		return err
	}
	idx := make([]int64, vals.Size())
	num.topk(x.Data, vals.Data, idx, outer, n, inner, k, c.Int("largest", 1) == 1)
	c.Set(0, vals)
	c.Set(1, tensor.From(idx, shape...))
	return nil
}

// cumSumKernel: y_j = Σ_{i ≤ j} x_i along axis (i < j when exclusive=1; from the end when reverse=1).
func cumSumKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x := c.In[0]
	a, err := ScalarInt(c.In[1])
	if err != nil {
		return fmt.Errorf("axis: %w", err)
	}
	axis, err := NormAxis(a, x.Rank())
	if err != nil {
		return err
	}
	num, err := shapeNumFor(x.Data)
	if err != nil {
		return err
	}
	outer, n, inner := orderLanes(x.Shape, axis)
	out := c.Arena().New(x.DType, x.Shape)
	num.cumsum(x.Data, out.Data, outer, n, inner, c.Int("exclusive", 0) == 1, c.Int("reverse", 0) == 1)
	c.Set(0, out)
	return nil
}
