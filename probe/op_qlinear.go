package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Quantized products: ONNX QLinearConv and QLinearMatMul, and com.microsoft
// QGemm. Each accumulates exactly in integers,
//
//	acc = Σ (a − a_zero_point)·(b − b_zero_point) (+ bias, an int32 with scale a_scale·b_scale)
//
// then requantizes in float32 as quantization runtimes do:
//
//	y = saturate(round(acc · (a_scale·b_scale / y_scale)) + y_zero_point)
//
// with round half to even. The weight operand may carry one scale and zero
// point per output channel (Conv: per output feature map; MatMul and Gemm:
// per column of B).

func init() {
	reg("QLinearConv", qlinearConvKernel, 10)
	reg("QLinearMatMul", qlinearMatMulKernel, 10, 21)
	Register("com.microsoft", "QGemm", 1, qgemmKernel)
}

// requantMult returns a_scale·b_scale/y_scale in float32 for one output channel.
func requantMult(as, bs, ys float64) float32 {
	return float32(as) * float32(bs) / float32(ys)
}

// qlinearConvKernel: inputs x, x_scale, x_zero_point, w, w_scale, w_zero_point,
// y_scale, y_zero_point, optional int32 bias B; Conv attributes as for Conv.
func qlinearConvKernel(c *Call) error {
	if err := c.Need(8); err != nil {
		return err
	}
	x, w := c.In[0], c.In[3]
	xq, err := scalarQParams("x", c.In[1], c.In[2], x.DType)
	if err != nil {
		return err
	}
	wq, err := readQParams(c.In[4], c.In[5], w.DType)
	if err != nil {
		return fmt.Errorf("w: %w", err)
	}
	yq, err := scalarQParams("y", c.In[6], c.In[7], tensor.Uint8)
	if err != nil {
		return err
	}
	xf, err := linShifted(x, c.In[2], -1)
	if err != nil {
		return fmt.Errorf("x: %w", err)
	}
	wf, err := linShifted(w, c.In[5], 0)
	if err != nil {
		return fmt.Errorf("w: %w", err)
	}
	var bias *tensor.Tensor
	if b := c.Input(8); b != nil {
		if b.DType != tensor.Int32 {
			return fmt.Errorf("bias must be int32, got %v", b.DType)
		}
		bf := make([]float64, b.Size())
		for i := range bf {
			bf[i] = b.Float64At(i)
		}
		bias = tensor.From(bf, b.Shape...)
	}
	acc, err := convRun[float64](c, tensor.From(xf, x.Shape...), tensor.From(wf, w.Shape...), bias)
	if err != nil {
		return err
	}
	M := w.Shape[0]
	if len(wq.scale) != 1 && len(wq.scale) != M {
		return fmt.Errorf("w_scale has %d values for %d output channels", len(wq.scale), M)
	}
	mult := make([]float32, M)
	for m := range mult {
		mult[m] = requantMult(xq.scale[0], wq.scale[min(m, len(wq.scale)-1)], yq.scale[0])
	}
	spatial := 1
	for _, d := range acc.Shape[2:] {
		spatial *= d
	}
	ad := acc.F64()
	out := make([]float64, len(ad))
	for i, v := range ad {
		out[i] = Saturate(float64(float32(v)*mult[(i/spatial)%M]), yq.zp[0], yq.lo, yq.hi)
	}
	c.Set(0, intTensor(yq.dt, out, acc.Shape))
	return nil
}

// qlinearMatMulKernel: inputs a, a_scale, a_zero_point, b, b_scale,
// b_zero_point, y_scale, y_zero_point; a's parameters per tensor or per row,
// b's per tensor or per column, y's per tensor.
func qlinearMatMulKernel(c *Call) error {
	if err := c.Need(8); err != nil {
		return err
	}
	a, b := c.In[0], c.In[3]
	if a.Rank() == 0 || b.Rank() == 0 {
		return fmt.Errorf("QLinearMatMul needs inputs of rank ≥ 1")
	}
	aq, err := readQParams(c.In[1], c.In[2], a.DType)
	if err != nil {
		return fmt.Errorf("a: %w", err)
	}
	bq, err := readQParams(c.In[4], c.In[5], b.DType)
	if err != nil {
		return fmt.Errorf("b: %w", err)
	}
	yq, err := scalarQParams("y", c.In[6], c.In[7], tensor.Uint8)
	if err != nil {
		return err
	}
	af, err := linShifted(a, c.In[2], a.Rank()-2)
	if err != nil {
		return fmt.Errorf("a: %w", err)
	}
	bf, err := linShifted(b, c.In[5], b.Rank()-1)
	if err != nil {
		return fmt.Errorf("b: %w", err)
	}
	acc, err := linMatMul(c.Arena(), tensor.From(af, a.Shape...), af, tensor.From(bf, b.Shape...), bf)
	if err != nil {
		return err
	}
	N, M := 1, 1
	if b.Rank() > 1 {
		N = b.Shape[b.Rank()-1]
	}
	if a.Rank() > 1 {
		M = a.Shape[a.Rank()-2]
	}
	if len(aq.scale) != 1 && len(aq.scale) != M || len(bq.scale) != 1 && len(bq.scale) != N {
		return fmt.Errorf("scales of shapes %v and %v do not fit a %d×%d product", c.In[1].Shape, c.In[4].Shape, M, N)
	}
	ad := acc.F64()
	out := make([]float64, len(ad))
	for i, v := range ad {
		row, col := (i/N)%M, i%N
		m := requantMult(aq.scale[min(row, len(aq.scale)-1)], bq.scale[min(col, len(bq.scale)-1)], yq.scale[0])
		out[i] = Saturate(float64(float32(v)*m), yq.zp[0], yq.lo, yq.hi)
	}
	c.Set(0, intTensor(yq.dt, out, acc.Shape))
	return nil
}

// qgemmKernel (com.microsoft QGemm): inputs A, a_scale, a_zero_point, B,
// b_scale, b_zero_point, optional C (int32 bias with scale a_scale·b_scale and
// zero point 0), optional y_scale, y_zero_point; attributes transA, transB,
// alpha. Y = alpha·a_scale·b_scale·((A − a_zp)(B − b_zp) + C), quantized with
// y_scale and y_zero_point when y_scale is given, float32 otherwise.
func qgemmKernel(c *Call) error {
	if err := c.Need(6); err != nil {
		return err
	}
	a, b := c.In[0], c.In[3]
	if a.Rank() != 2 || b.Rank() != 2 {
		return fmt.Errorf("QGemm needs 2-D A and B, got %v and %v", a.Shape, b.Shape)
	}
	aq, err := scalarQParams("A", c.In[1], c.In[2], a.DType)
	if err != nil {
		return err
	}
	bq, err := readQParams(c.In[4], c.In[5], b.DType)
	if err != nil {
		return fmt.Errorf("B: %w", err)
	}
	transA, transB := c.Int("transA", 0) != 0, c.Int("transB", 0) != 0
	M, K := a.Shape[0], a.Shape[1]
	if transA {
		M, K = K, M
	}
	K2, N := b.Shape[0], b.Shape[1]
	if transB {
		K2, N = N, K2
	}
	if K != K2 {
		return fmt.Errorf("QGemm inner dimensions differ: A %v, B %v", a.Shape, b.Shape)
	}
	if len(bq.scale) != 1 && len(bq.scale) != N {
		return fmt.Errorf("b_scale has %d values for %d columns", len(bq.scale), N)
	}
	af, err := linShifted(a, c.In[2], -1)
	if err != nil {
		return fmt.Errorf("A: %w", err)
	}
	bf := make([]float64, b.Size())
	for i := range bf {
		col := i % b.Shape[1]
		if transB {
			col = i / b.Shape[1]
		}
		bf[i] = b.Float64At(i) - bq.zp[min(col, len(bq.zp)-1)]
	}
	acc := make([]float64, M*N)
	if cb := c.Input(6); cb != nil && cb.Size() > 0 {
		if cb.DType != tensor.Int32 {
			return fmt.Errorf("C must be int32, got %v", cb.DType)
		}
		if _, err := Broadcast(cb.Shape, []int{M, N}); err != nil {
			return fmt.Errorf("C of shape %v does not broadcast to %d×%d", cb.Shape, M, N)
		}
		bc := BroadcastTo(c.Arena(), cb, []int{M, N})
		for i := range acc {
			acc[i] = bc.Float64At(i)
		}
	}
	linGemmT(transA, transB, M, N, K, 1, af, a.Shape[1], bf, b.Shape[1], 1, acc, N)
	alpha := c.Float("alpha", 1)
	ys := c.Input(7)
	if ys == nil || ys.Size() == 0 {
		out := make([]float32, len(acc))
		for i, v := range acc {
			out[i] = float32(v) * (alpha * float32(aq.scale[0]) * float32(bq.scale[min(i%N, len(bq.scale)-1)]))
		}
		c.Set(0, tensor.From(out, M, N))
		return nil
	}
	yq, err := scalarQParams("y", ys, c.Input(8), tensor.Uint8)
	if err != nil {
		return err
	}
	out := make([]float64, len(acc))
	for i, v := range acc {
		m := alpha * requantMult(aq.scale[0], bq.scale[min(i%N, len(bq.scale)-1)], yq.scale[0])
		out[i] = Saturate(float64(float32(v)*m), yq.zp[0], yq.lo, yq.hi)
	}
	c.Set(0, intTensor(yq.dt, out, []int{M, N}))
	return nil
}
