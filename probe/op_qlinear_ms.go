package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Quantized element-wise operators of the com.microsoft domain, which
// quantization tools emit for the operator-oriented format. All take 8-bit
// tensors with per-tensor scale and zero point; the arithmetic is float32 as
// in quantization runtimes, rounded half to even and saturated:
//
//	QLinearAdd: c = sat(round(a_s/c_s·(a − a_zp) + b_s/c_s·(b − b_zp)) + c_zp)
//	QLinearMul: c = sat(round((a − a_zp)·(b − b_zp)·(a_s·b_s/c_s)) + c_zp)
//	QLinearSigmoid, QLinearLeakyRelu: y = Q_y(f(DQ_x(x))), f = 1/(1+e^−v) or
//	    v ≥ 0 ? v : alpha·v, through a table of the 256 input levels
//	QLinearGlobalAveragePool: y = sat(round((Σx − n·x_zp)·x_s/(y_s·n)) + y_zp)
//	    over the n spatial positions of each channel (NCHW, or NHWC with channels_last=1)
//	QLinearConcat: each input requantized to (y_scale, y_zero_point), then Concat

func init() {
	Register("com.microsoft", "QLinearAdd", 1, qlinearBinary(false))
	Register("com.microsoft", "QLinearMul", 1, qlinearBinary(true))
	Register("com.microsoft", "QLinearSigmoid", 1, qlinearUnary(func(c *Call) func(float32) float32 {
		return func(v float32) float32 { return float32(1 / (1 + math.Exp(-float64(v)))) }
	}))
	Register("com.microsoft", "QLinearLeakyRelu", 1, qlinearUnary(func(c *Call) func(float32) float32 {
		alpha := c.Float("alpha", 0.01)
		return func(v float32) float32 {
			if v >= 0 {
				return v
			}
			return v * alpha
		}
	}))
	Register("com.microsoft", "QLinearGlobalAveragePool", 1, qlinearGlobalAveragePoolKernel)
	Register("com.microsoft", "QLinearConcat", 1, qlinearConcatKernel)
}

func need8bit(what string, t *tensor.Tensor) error {
	if t.DType != tensor.Uint8 && t.DType != tensor.Int8 {
		return fmt.Errorf("%s must be uint8 or int8, got %v", what, t.DType)
	}
	return nil
}

// qlinearBinary: inputs A, A_scale, A_zero_point, B, B_scale, B_zero_point,
// C_scale, C_zero_point, with NumPy broadcasting of A and B.
func qlinearBinary(mul bool) Kernel {
	return func(c *Call) error {
		if err := c.Need(7); err != nil {
			return err
		}
		a, b := c.In[0], c.In[3]
		if err := need8bit("A", a); err != nil {
			return err
		}
		if b.DType != a.DType {
			return fmt.Errorf("B type %v differs from A type %v", b.DType, a.DType)
		}
		aq, err := scalarQParams("A", c.In[1], c.Input(2), a.DType)
		if err != nil {
			return err
		}
		bq, err := scalarQParams("B", c.In[4], c.Input(5), b.DType)
		if err != nil {
			return err
		}
		cq, err := scalarQParams("C", c.In[6], c.Input(7), a.DType)
		if err != nil {
			return err
		}
		shape, err := Broadcast(a.Shape, b.Shape)
		if err != nil {
			return err
		}
		ab, bb := BroadcastTo(c.Arena(), a, shape), BroadcastTo(c.Arena(), b, shape)
		as, bs, cs := float32(aq.scale[0]), float32(bq.scale[0]), float32(cq.scale[0])
		rA, rB, rM := as/cs, bs/cs, as*bs/cs
		out := make([]float64, ab.Size())
		for i := range out {
			x := float32(ab.Float64At(i) - aq.zp[0])
			y := float32(bb.Float64At(i) - bq.zp[0])
			var v float32
			if mul {
				v = x * y * rM
			} else {
				v = rA*x + rB*y
			}
			out[i] = Saturate(float64(v), cq.zp[0], cq.lo, cq.hi)
		}
		c.Set(0, intTensor(cq.dt, out, shape))
		return nil
	}
}

// qtable maps every level of an 8-bit input type through y = Q_out(f(DQ_in(x))).
func qtable(in, out qparams, f func(float32) float32) [256]float64 {
	var t [256]float64
	for i := range t {
		x := float64(i)
		if in.dt == tensor.Int8 {
			x = float64(int8(uint8(i)))
		}
		v := float32(in.dequantize(x, 0))
		if f != nil {
			v = f(v)
		}
		t[i] = out.quantize(float64(v), 0)
	}
	return t
}

// tableIndex is the table slot of element i of an 8-bit tensor.
func tableIndex(t *tensor.Tensor, i int) int {
	if d, ok := t.Data.([]int8); ok {
		return int(uint8(d[i]))
	}
	return int(t.Data.([]uint8)[i])
}

// qlinearUnary: inputs X, X_scale, X_zero_point, Y_scale, Y_zero_point.
func qlinearUnary(fn func(c *Call) func(float32) float32) Kernel {
	return func(c *Call) error {
		if err := c.Need(4); err != nil {
			return err
		}
		x := c.In[0]
		if err := need8bit("X", x); err != nil {
			return err
		}
		xq, err := scalarQParams("X", c.In[1], c.Input(2), x.DType)
		if err != nil {
			return err
		}
		yq, err := scalarQParams("Y", c.In[3], c.Input(4), x.DType)
		if err != nil {
			return err
		}
		tab := qtable(xq, yq, fn(c))
		out := make([]float64, x.Size())
		for i := range out {
			out[i] = tab[tableIndex(x, i)]
		}
		c.Set(0, intTensor(yq.dt, out, x.Shape))
		return nil
	}
}

// qlinearGlobalAveragePoolKernel: inputs X, x_scale, x_zero_point, y_scale,
// y_zero_point; attribute channels_last (0: NCHW…, 1: NHWC…).
func qlinearGlobalAveragePoolKernel(c *Call) error {
	if err := c.Need(4); err != nil {
		return err
	}
	x := c.In[0]
	if err := need8bit("X", x); err != nil {
		return err
	}
	if x.Rank() < 3 {
		return fmt.Errorf("X must have rank ≥ 3, got %v", x.Shape)
	}
	xq, err := scalarQParams("x", c.In[1], c.Input(2), x.DType)
	if err != nil {
		return err
	}
	yq, err := scalarQParams("y", c.In[3], c.Input(4), x.DType)
	if err != nil {
		return err
	}
	last := c.Int("channels_last", 0) != 0
	N := x.Shape[0]
	C, sp := x.Shape[1], x.Shape[2:]
	if last {
		C, sp = x.Shape[x.Rank()-1], x.Shape[1:x.Rank()-1]
	}
	n := 1
	for _, d := range sp {
		n *= d
	}
	if n == 0 {
		return fmt.Errorf("X %v has no spatial positions", x.Shape)
	}
	scale := float32(xq.scale[0]) / (float32(yq.scale[0]) * float32(n))
	out := make([]float64, N*C)
	for b := 0; b < N; b++ {
		for ch := 0; ch < C; ch++ {
			var sum float64
			for p := 0; p < n; p++ {
				i := (b*C+ch)*n + p
				if last {
					i = (b*n+p)*C + ch
				}
				sum += x.Float64At(i)
			}
			out[b*C+ch] = Saturate(float64(float32(sum-float64(n)*xq.zp[0])*scale), yq.zp[0], yq.lo, yq.hi)
		}
	}
	shape := make([]int, x.Rank())
	for d := range shape {
		shape[d] = 1
	}
	shape[0] = N
	if last {
		shape[len(shape)-1] = C
	} else {
		shape[1] = C
	}
	c.Set(0, intTensor(yq.dt, out, shape))
	return nil
}

// qlinearConcatKernel: inputs Y_scale, Y_zero_point, then (X, X_scale,
// X_zero_point) per input; attribute axis.
func qlinearConcatKernel(c *Call) error {
	if len(c.In) < 5 || (len(c.In)-2)%3 != 0 {
		return fmt.Errorf("QLinearConcat needs Y_scale, Y_zero_point and triples (X, X_scale, X_zero_point), got %d inputs", len(c.In))
	}
	if err := c.Need(len(c.In)); err != nil {
		return err
	}
	first := c.In[2]
	if err := need8bit("X", first); err != nil {
		return err
	}
	yq, err := scalarQParams("Y", c.In[0], c.In[1], first.DType)
	if err != nil {
		return err
	}
	rank := first.Rank()
	axis, err := NormAxis(int(c.Int("axis", 0)), rank)
	if err != nil {
		return err
	}
	var parts []*tensor.Tensor
	total := 0
	for k := 2; k < len(c.In); k += 3 {
		x := c.In[k]
		if x.DType != first.DType || x.Rank() != rank {
			return fmt.Errorf("input %d: %v%v does not fit %v%v", (k-2)/3, x.DType, x.Shape, first.DType, first.Shape)
		}
		for d := 0; d < rank; d++ {
			if d != axis && x.Shape[d] != first.Shape[d] {
				return fmt.Errorf("input %d of shape %v does not fit %v along axis %d", (k-2)/3, x.Shape, first.Shape, axis)
			}
		}
		xq, err := scalarQParams(fmt.Sprintf("input %d", (k-2)/3), c.In[k+1], c.In[k+2], x.DType)
		if err != nil {
			return err
		}
		tab := qtable(xq, yq, nil)
		vals := make([]float64, x.Size())
		for i := range vals {
			vals[i] = tab[tableIndex(x, i)]
		}
		parts = append(parts, tensor.From(vals, x.Shape...))
		total += x.Shape[axis]
	}
	shape := append([]int{}, first.Shape...)
	shape[axis] = total
	outer, inner := 1, 1
	for _, d := range shape[:axis] {
		outer *= d
	}
	for _, d := range shape[axis+1:] {
		inner *= d
	}
	out := make([]float64, 0, outer*total*inner)
	for o := 0; o < outer; o++ {
		for _, p := range parts {
			w := p.Shape[axis] * inner
			out = append(out, p.F64()[o*w:(o+1)*w]...)
		}
	}
	c.Set(0, intTensor(yq.dt, out, shape))
	return nil
}
