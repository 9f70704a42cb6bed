package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Linear quantizers (ONNX QuantizeLinear, DequantizeLinear, DynamicQuantizeLinear,
// and the com.microsoft QuantizeLinear/DequantizeLinear that quantization tools
// emit with 16-bit types before opset 21):
//
//	QuantizeLinear:   y = saturate(round(x / y_scale) + y_zero_point)
//	DequantizeLinear: y = (x − x_zero_point) · x_scale
//
// with round half to even. Scale and zero point are per tensor, per axis
// (attribute axis, default 1) or, from opset 21, per block of block_size
// elements along axis. Float8, int4 and int2 types are not supported.

func init() {
	reg("QuantizeLinear", quantizeLinearKernel, 10, 13, 19, 21)
	reg("DequantizeLinear", dequantizeLinearKernel, 10, 13, 19, 21)
	reg("DynamicQuantizeLinear", dynamicQuantizeLinearKernel, 11)
	Register("com.microsoft", "QuantizeLinear", 1, quantizeLinearKernel)
	Register("com.microsoft", "DequantizeLinear", 1, dequantizeLinearKernel)
}

// quantAxes reads the axis and block_size attributes.
func quantAxes(c *Call) (axis, block int) {
	return int(c.Int("axis", 1)), int(c.Int("block_size", 0))
}

func quantizeLinearKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x := c.In[0]
	dt := tensor.Uint8
	if od := c.Int("output_dtype", 0); od != 0 {
		dt = tensor.DType(od)
	}
	if zp := c.Input(2); zp != nil && zp.Size() > 0 && c.Has("output_dtype") && zp.DType != dt {
		return fmt.Errorf("output_dtype %v differs from the zero point's type %v", dt, zp.DType)
	}
	q, err := readQParams(c.In[1], c.Input(2), dt)
	if err != nil {
		return err
	}
	axis, block := quantAxes(c)
	idx, err := ParamIndex(x.Shape, c.In[1].Shape, axis, block)
	if err != nil {
		return err
	}
	out := make([]float64, x.Size())
	for i := range out {
		out[i] = q.quantize(x.Float64At(i), idx(i))
	}
	c.Set(0, intTensor(q.dt, out, x.Shape))
	return nil
}

func dequantizeLinearKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x := c.In[0]
	if _, _, ok := QuantRange(x.DType); !ok {
		return fmt.Errorf("input type %v is not a supported quantized type (uint8, int8, uint16, int16, int32)", x.DType)
	}
	q, err := readQParams(c.In[1], c.Input(2), x.DType)
	if err != nil {
		return err
	}
	if q.dt != x.DType {
		return fmt.Errorf("zero point type %v differs from input type %v", q.dt, x.DType)
	}
	axis, block := quantAxes(c)
	idx, err := ParamIndex(x.Shape, c.In[1].Shape, axis, block)
	if err != nil {
		return err
	}
	out := make([]float32, x.Size())
	for i := range out {
		out[i] = float32(q.dequantize(x.Float64At(i), idx(i)))
	}
	c.Set(0, tensor.From(out, x.Shape...))
	return nil
}

// DynamicQuantizeLinear computes uint8 parameters from the data itself:
//
//	x_min = min(0, min x), x_max = max(0, max x)
//	y_scale = (x_max − x_min) / 255
//	y_zero_point = saturate(round(−x_min / y_scale))
//	y = saturate(round(x / y_scale) + y_zero_point)
//
// (all in float32). An all-zero input gets scale 0, zero point 0 and y = 0.
func dynamicQuantizeLinearKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	if !x.DType.IsFloat() {
		return fmt.Errorf("input must be float, got %v", x.DType)
	}
	var lo, hi float32
	for i := 0; i < x.Size(); i++ {
		v := float32(x.Float64At(i))
		lo, hi = min(lo, v), max(hi, v)
	}
	scale := (hi - lo) / 255
	zp := 0.0
	if scale != 0 {
		zp = Saturate(float64(-lo/scale), 0, 0, 255)
	}
	out := make([]float64, x.Size())
	if scale != 0 {
		for i := range out {
			out[i] = Saturate(float64(float32(x.Float64At(i))/scale), zp, 0, 255)
		}
	}
	c.Set(0, intTensor(tensor.Uint8, out, x.Shape))
	c.Set(1, tensor.From([]float32{scale}))
	c.Set(2, tensor.From([]uint8{uint8(zp)}))
	return nil
}
