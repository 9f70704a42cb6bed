package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// com.microsoft activation and bias operators written by transformer
// export and optimisation tools (semantics: onnxruntime docs/ContribOperators.md).
//
//	Gelu(X)            = X/2·(1 + erf(X/√2))
//	BiasGelu(A, B)     = Gelu(A + B)                       B broadcast over the last axis
//	FastGelu(X, bias)  = x/2·(1 + tanh(√(2/π)·(x + 0.044715·x³))),  x = X + bias (bias optional)
//	QuickGelu(X)       = X·σ(alpha·X)                      alpha default 1.702
//	BiasAdd(X, b, S)   = X + b + S                         X, S (N, S, C), b (C)
//
// All compute in float32 with float64 intermediates.
func init() {
	Register("com.microsoft", "Gelu", 1, msGeluKernel(false, msGeluErf))
	Register("com.microsoft", "BiasGelu", 1, msGeluKernel(true, msGeluErf))
	Register("com.microsoft", "FastGelu", 1, msGeluKernel(true, msGeluTanh))
	Register("com.microsoft", "QuickGelu", 1, msQuickGeluKernel)
	Register("com.microsoft", "BiasAdd", 1, msBiasAddKernel)
}

func msGeluErf(x float64) float64 { return 0.5 * x * (1 + math.Erf(x/math.Sqrt2)) }

func msGeluTanh(x float64) float64 {
	return 0.5 * x * (1 + math.Tanh(math.Sqrt(2/math.Pi)*(x+0.044715*x*x*x)))
}

// msAddLastAxis returns x + bias with bias (length = x's last dimension) broadcast.
func msAddLastAxis(x, bias *tensor.Tensor, what string) ([]float64, error) {
	xd := x.F32()
	out := make([]float64, len(xd))
	if bias == nil {
		for i, v := range xd {
			out[i] = float64(v)
		}
		return out, nil
	}
	if bias.DType != tensor.Float32 {
		return nil, fmt.Errorf("%s must be float32, got %v", what, bias.DType)
	}
	bd := bias.F32()
	if x.Rank() == 0 || len(bd) != x.Shape[x.Rank()-1] {
		return nil, fmt.Errorf("%s %v does not match the last axis of input %v", what, bias.Shape, x.Shape)
	}
	n := len(bd)
	for i, v := range xd {
		out[i] = float64(v) + float64(bd[i%n])
	}
	return out, nil
}

func msGeluKernel(withBias bool, f func(float64) float64) Kernel {
	return func(c *Call) error {
		if err := c.Need(1); err != nil {
			return err
		}
		x := c.In[0]
		if x.DType != tensor.Float32 {
			return fmt.Errorf("input must be float32, got %v", x.DType)
		}
		var bias *tensor.Tensor
		if withBias {
			bias = c.Input(1)
		}
		v, err := msAddLastAxis(x, bias, "bias")
		if err != nil {
			return err
		}
		y := c.Arena().NewUninit(tensor.Float32, x.Shape)
		yd := y.F32()
		for i, u := range v {
			yd[i] = float32(f(u))
		}
		c.Set(0, y)
		return nil
	}
}

func msQuickGeluKernel(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	if x.DType != tensor.Float32 {
		return fmt.Errorf("input must be float32, got %v", x.DType)
	}
	a := float64(c.Float("alpha", 1.702))
	y := c.Arena().NewUninit(tensor.Float32, x.Shape)
	yd := y.F32()
	for i, v := range x.F32() {
		u := float64(v)
		yd[i] = float32(u / (1 + math.Exp(-a*u)))
	}
	c.Set(0, y)
	return nil
}

func msBiasAddKernel(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	x, b, s := c.In[0], c.In[1], c.In[2]
	if x.Rank() != 3 || !tensor.SameShape(x.Shape, s.Shape) {
		return fmt.Errorf("X %v and skip %v must be the same 3-D shape (N, S, C)", x.Shape, s.Shape)
	}
	if s.DType != tensor.Float32 {
		return fmt.Errorf("skip must be float32, got %v", s.DType)
	}
	v, err := msAddLastAxis(x, b, "bias")
	if err != nil {
		return err
	}
	y := c.Arena().NewUninit(tensor.Float32, x.Shape)
	yd, sd := y.F32(), s.F32()
	for i, u := range v {
		yd[i] = float32(u + float64(sd[i]))
	}
	c.Set(0, y)
	return nil
}
