package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Integer products of 8-bit tensors: MatMulInteger and ConvInteger,
// Y = (A − a_zero_point) ⊗ (B − b_zero_point) accumulated in int32. The
// shifted operands are computed exactly in float64 (every partial sum of
// 8-bit products stays far below 2^53), then rounded back to int32.

func init() {
	reg("MatMulInteger", matMulIntegerKernel, 10)
	reg("ConvInteger", convIntegerKernel, 10)
}

// linShifted returns t − zp as float64; zp is a scalar or a vector of
// per-slice values along axis (each value applies to one index of that axis).
func linShifted(t, zp *tensor.Tensor, axis int) ([]float64, error) {
	switch t.DType {
	case tensor.Uint8, tensor.Int8:
	default:
		return nil, fmt.Errorf("expects uint8 or int8, got %v", t.DType)
	}
	out := make([]float64, t.Size())
	for i := range out {
		out[i] = t.Float64At(i)
	}
	if zp == nil || zp.Size() == 0 {
		return out, nil
	}
	if zp.DType != t.DType {
		return nil, fmt.Errorf("zero point type %v differs from %v", zp.DType, t.DType)
	}
	if zp.Size() == 1 {
		z := zp.Float64At(0)
		for i := range out {
			out[i] -= z
		}
		return out, nil
	}
	if axis < 0 || axis >= t.Rank() || zp.Size() != t.Shape[axis] {
		return nil, fmt.Errorf("zero point of shape %v does not fit input %v", zp.Shape, t.Shape)
	}
	inner := 1
	for _, d := range t.Shape[axis+1:] {
		inner *= d
	}
	n := t.Shape[axis]
	for i := range out {
		out[i] -= zp.Float64At((i / inner) % n)
	}
	return out, nil
}

func linToInt32(t *tensor.Tensor) *tensor.Tensor {
	src := t.F64()
	out := make([]int32, len(src))
	for i, v := range src {
		out[i] = int32(math.Round(v))
	}
	return tensor.From(out, t.Shape...)
}

// matMulIntegerKernel: Y = (A − a_zp)·(B − b_zp) with MatMul broadcasting;
// a_zp is a scalar or one value per row of A, b_zp a scalar or one per column of B.
func matMulIntegerKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	a, b := c.In[0], c.In[1]
	if a.Rank() == 0 || b.Rank() == 0 {
		return fmt.Errorf("MatMulInteger needs inputs of rank ≥ 1")
	}
	af, err := linShifted(a, c.Input(2), a.Rank()-2)
	if err != nil {
		return fmt.Errorf("A: %w", err)
	}
	bf, err := linShifted(b, c.Input(3), b.Rank()-1)
	if err != nil {
		return fmt.Errorf("B: %w", err)
	}
	at, bt := tensor.From(af, a.Shape...), tensor.From(bf, b.Shape...)
	out, err := linMatMul(c.Arena(), at, af, bt, bf)
	if err != nil {
		return err
	}
	c.Set(0, linToInt32(out))
	return nil
}

// convIntegerKernel: Conv of (X − x_zp) with (W − w_zp), w_zp scalar or per output channel.
func convIntegerKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, w := c.In[0], c.In[1]
	xf, err := linShifted(x, c.Input(2), -1)
	if err != nil {
		return fmt.Errorf("X: %w", err)
	}
	wf, err := linShifted(w, c.Input(3), 0)
	if err != nil {
		return fmt.Errorf("W: %w", err)
	}
	out, err := convRun[float64](c, tensor.From(xf, x.Shape...), tensor.From(wf, w.Shape...), nil)
	if err != nil {
		return err
	}
	c.Set(0, linToInt32(out))
	return nil
}
