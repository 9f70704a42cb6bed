package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Activation functions. Float-only activations are written once in float64
// and applied to float32 data through elemVia64; Relu, PRelu, Shrink and Clip
// also run on integer types.

func init() {
	reg("Relu", elemRelu, 1, 6, 13, 14)
	reg("LeakyRelu", elemLeakyRelu, 1, 6, 16)
	reg("PRelu", elemPRelu, 1, 6, 7, 9, 16)
	reg("Elu", elemElu, 1, 6)
	reg("Selu", elemSelu, 1, 6)
	reg("Celu", elemCelu, 12)
	reg("ThresholdedRelu", elemThresholdedRelu, 10)
	reg("Sigmoid", unaryF32Kernel(elemSigmoid, sigmoidF32), 1, 6, 13)
	reg("HardSigmoid", elemHardSigmoid, 1, 6)
	reg("HardSwish", unaryF32Kernel(elemHardSwish, hardSwishF32), 14)
	reg("Tanh", unaryF32Kernel(math.Tanh, tanhF32), 1, 6, 13)
	reg("Softplus", unaryF32Kernel(elemSoftplus, softplusF32), 1)
	reg("Softsign", elemFloatKernel(func(x float64) float64 { return x / (1 + math.Abs(x)) }), 1)
	reg("Gelu", elemGelu, 20)
	reg("Mish", unaryF32Kernel(elemMish, mishF32), 18)
	reg("Swish", elemSwish, 24)
	reg("Shrink", elemShrink, 9)
	reg("Clip", elemClip, 1, 6, 11, 12, 13)
}

// elemFloatKernel is a one-input float kernel from a float64 formula.
func elemFloatKernel(g func(float64) float64) Kernel { return unaryFloat(elemVia64(g), g) }

// elemFloatMap applies g (float64 formula) to input 0 and sets output 0.
func elemFloatMap(c *Call, g func(float64) float64) error {
	return elemFloatKernel(g)(c)
}

// elemSigmoid: 1 / (1 + e^-x), evaluated without overflow for large |x|.
func elemSigmoid(x float64) float64 {
	if x >= 0 {
		return 1 / (1 + math.Exp(-x))
	}
	e := math.Exp(x)
	return e / (1 + e)
}

// elemSoftplus: ln(1 + e^x) = max(x, 0) + ln(1 + e^-|x|).
func elemSoftplus(x float64) float64 {
	return math.Max(x, 0) + math.Log1p(math.Exp(-math.Abs(x)))
}

// elemHardSwish: x * max(0, min(1, x/6 + 1/2)).
func elemHardSwish(x float64) float64 {
	return x * math.Max(0, math.Min(1, x/6+0.5))
}

// Relu: y = max(x, 0).
func elemRelu(c *Call) error {
	return elemNumericMap(c, elemReluOp, 0, 0)
}

// LeakyRelu: y = x for x >= 0, alpha*x otherwise (alpha default 0.01).
// float32 inputs go through leakyReluF32, the function a fused Conv applies
// too (fuse.go).
func elemLeakyRelu(c *Call) error {
	alpha := c.Float("alpha", 0.01)
	a := float64(alpha)
	return unaryF32Kernel(func(x float64) float64 {
		if x < 0 {
			return a * x
		}
		return x
	}, func(dst, src []float32) { leakyReluF32(dst, src, alpha) })(c)
}

// Elu: y = x for x > 0, alpha*(e^x - 1) otherwise (alpha default 1).
func elemElu(c *Call) error {
	return eluKernel(1, float64(c.Float("alpha", 1)), 1)(c)
}

// Selu: y = gamma*x for x > 0, gamma*alpha*(e^x - 1) otherwise.
func elemSelu(c *Call) error {
	a := float64(c.Float("alpha", 1.67326319217681884765625))
	g := float64(c.Float("gamma", 1.05070102214813232421875))
	return eluKernel(g, g*a, 1)(c)
}

// Celu: y = max(0, x) + min(0, alpha*(e^(x/alpha) - 1)) (alpha default 1);
// for alpha > 0 that is x for x > 0 and alpha*(e^(x/alpha) - 1) otherwise.
func elemCelu(c *Call) error {
	a := float64(c.Float("alpha", 1))
	if a == 0 {
		return fmt.Errorf("alpha must not be 0")
	}
	if a > 0 {
		return eluKernel(1, a, a)(c)
	}
	return elemFloatMap(c, func(x float64) float64 {
		return math.Max(0, x) + math.Min(0, a*math.Expm1(x/a))
	})
}

// eluKernel runs eluLike(p, q, d), with the vector kernel on float32.
func eluKernel(p, q, d float64) Kernel {
	g := eluLike(p, q, d)
	return unaryF32Kernel(g, actF32(actElu, [3]float64{p, q, d}, g))
}

// ThresholdedRelu: y = x for x > alpha, 0 otherwise (alpha default 1).
func elemThresholdedRelu(c *Call) error {
	a := float64(c.Float("alpha", 1))
	return elemFloatMap(c, func(x float64) float64 {
		if x > a {
			return x
		}
		return 0
	})
}

// HardSigmoid: y = max(0, min(1, alpha*x + beta)) (alpha 0.2, beta 0.5).
func elemHardSigmoid(c *Call) error {
	a := float64(c.Float("alpha", 0.2))
	b := float64(c.Float("beta", 0.5))
	g := hardSigmoid(a, b)
	return unaryF32Kernel(g, actF32(actHardSigmoid, [3]float64{a, b}, g))(c)
}

// Gelu: approximate="none": y = x/2 * (1 + erf(x/sqrt 2));
// approximate="tanh": y = x/2 * (1 + tanh(sqrt(2/pi) * (x + 0.044715 x^3))).
func elemGelu(c *Call) error {
	switch mode := c.Str("approximate", "none"); mode {
	case "none":
		return elemFloatMap(c, func(x float64) float64 { return 0.5 * x * (1 + math.Erf(x/math.Sqrt2)) })
	case "tanh":
		k := math.Sqrt(2 / math.Pi)
		return elemFloatMap(c, func(x float64) float64 { return 0.5 * x * (1 + math.Tanh(k*(x+0.044715*x*x*x))) })
	default:
		return fmt.Errorf("approximate %q is not one of \"none\", \"tanh\"", mode)
	}
}

// Swish: y = x * sigmoid(alpha*x) (alpha default 1).
func elemSwish(c *Call) error {
	a := float64(c.Float("alpha", 1))
	return elemFloatMap(c, func(x float64) float64 { return x * elemSigmoid(a*x) })
}

// Shrink: y = x - bias for x > lambd, x + bias for x < -lambd, 0 otherwise.
func elemShrink(c *Call) error {
	return elemNumericMap(c, elemShrinkOp, float64(c.Float("lambd", 0.5)), float64(c.Float("bias", 0)))
}

type elemNumOp int

const (
	elemReluOp elemNumOp = iota
	elemShrinkOp
)

// elemNumericMap applies a parameterised op to input 0 of any numeric type.
func elemNumericMap(c *Call, op elemNumOp, p1, p2 float64) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	out := c.Arena().New(x.DType, x.Shape)
	switch d := x.Data.(type) {
	case []float32:
		if op == elemReluOp {
			f32Map(out.F32(), d, reluF32)
			break
		}
		elemNumericApply(op, p1, p2, out.F32(), d)
	case []float64:
		elemNumericApply(op, p1, p2, out.F64(), d)
	case []int64:
		elemNumericApply(op, p1, p2, out.I64(), d)
	case []int32:
		elemNumericApply(op, p1, p2, out.Data.([]int32), d)
	case []int16:
		elemNumericApply(op, p1, p2, out.Data.([]int16), d)
	case []int8:
		elemNumericApply(op, p1, p2, out.Data.([]int8), d)
	case []uint8:
		elemNumericApply(op, p1, p2, out.Data.([]uint8), d)
	case []uint16:
		elemNumericApply(op, p1, p2, out.Data.([]uint16), d)
	case []uint32:
		elemNumericApply(op, p1, p2, out.Data.([]uint32), d)
	case []uint64:
		elemNumericApply(op, p1, p2, out.Data.([]uint64), d)
	default:
		return fmt.Errorf("unsupported input type %v", x.DType)
	}
	c.Set(0, out)
	return nil
}

func elemNumericApply[T Number](op elemNumOp, p1, p2 float64, out, in []T) {
	switch op {
	case elemReluOp:
		for i, v := range in {
			if v < 0 {
				v = 0
			}
			out[i] = v
		}
	case elemShrinkOp:
		for i, v := range in {
			f := float64(v)
			switch {
			case f > p1:
				out[i] = T(f - p2)
			case f < -p1:
				out[i] = T(f + p2)
			default:
				out[i] = 0
			}
		}
	}
}

// PRelu: y = x for x >= 0, slope*x otherwise; slope broadcasts to x's shape
// (before opset 7, a 1-D slope is per channel).
func elemPRelu(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, s := c.In[0], c.In[1]
	if x.DType != s.DType {
		return fmt.Errorf("slope type %v differs from input type %v", s.DType, x.DType)
	}
	if c.Opset < 7 && s.Rank() == 1 && x.Rank() >= 2 && s.Shape[0] == x.Shape[1] && s.Shape[0] != 1 {
		// before opset 7 a 1-D slope holds one value per channel (axis 1)
		shape := make([]int, x.Rank()-1)
		for i := range shape {
			shape[i] = 1
		}
		shape[0] = s.Shape[0]
		s = s.Reshaped(shape)
	}
	os, err := Broadcast(x.Shape, s.Shape)
	if err != nil {
		return err
	}
	if !tensor.SameShape(os, x.Shape) {
		return fmt.Errorf("slope shape %v does not broadcast to input shape %v", s.Shape, x.Shape)
	}
	out := c.Arena().New(x.DType, os)
	switch d := x.Data.(type) {
	case []float32:
		elemPReluApply(out.F32(), os, d, s.F32(), s.Shape)
	case []float64:
		elemPReluApply(out.F64(), os, d, s.F64(), s.Shape)
	case []int64:
		elemPReluApply(out.I64(), os, d, s.I64(), s.Shape)
	case []int32:
		elemPReluApply(out.Data.([]int32), os, d, s.Data.([]int32), s.Shape)
	case []uint64:
		elemPReluApply(out.Data.([]uint64), os, d, s.Data.([]uint64), s.Shape)
	case []uint32:
		elemPReluApply(out.Data.([]uint32), os, d, s.Data.([]uint32), s.Shape)
	default:
		return fmt.Errorf("unsupported input type %v", x.DType)
	}
	c.Set(0, out)
	return nil
}

func elemPReluApply[T Number](out []T, os []int, x, s []T, ss []int) {
	binaryLoop(out, os, x, os, s, ss, func(v, k T) T {
		if v < 0 {
			return k * v
		}
		return v
	})
}

// Clip: y = min(max(x, min), max). Before opset 11 the bounds are float
// attributes; from 11 they are optional scalar inputs of x's type. When
// min > max every element becomes max.
func elemClip(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	lo, hi := c.Input(1), c.Input(2)
	if c.Opset < 11 {
		lo, hi = nil, nil
		if c.Has("min") {
			lo = elemScalarLike(x.DType, float64(c.Float("min", 0)))
		}
		if c.Has("max") {
			hi = elemScalarLike(x.DType, float64(c.Float("max", 0)))
		}
	}
	for _, b := range []*tensor.Tensor{lo, hi} {
		if b == nil {
			continue
		}
		if b.DType != x.DType {
			return fmt.Errorf("bound type %v differs from input type %v", b.DType, x.DType)
		}
		if b.Size() != 1 {
			return fmt.Errorf("bounds must be scalars, got shape %v", b.Shape)
		}
	}
	out := c.Arena().New(x.DType, x.Shape)
	switch d := x.Data.(type) {
	case []float32:
		l, h := float32(math.Inf(-1)), float32(math.Inf(1))
		if lo != nil {
			l = lo.F32()[0]
		}
		if hi != nil {
			h = hi.F32()[0]
		}
		if l == l && h == h {
			f32Map(out.F32(), d, func(dst, src []float32) { clipF32(dst, src, l, h) })
			break
		}
		elemClipApply(out.F32(), d, lo, hi)
	case []float64:
		elemClipApply(out.F64(), d, lo, hi)
	case []int64:
		elemClipApply(out.I64(), d, lo, hi)
	case []int32:
		elemClipApply(out.Data.([]int32), d, lo, hi)
	case []int16:
		elemClipApply(out.Data.([]int16), d, lo, hi)
	case []int8:
		elemClipApply(out.Data.([]int8), d, lo, hi)
	case []uint8:
		elemClipApply(out.Data.([]uint8), d, lo, hi)
	case []uint16:
		elemClipApply(out.Data.([]uint16), d, lo, hi)
	case []uint32:
		elemClipApply(out.Data.([]uint32), d, lo, hi)
	case []uint64:
		elemClipApply(out.Data.([]uint64), d, lo, hi)
	default:
		return fmt.Errorf("unsupported input type %v", x.DType)
	}
	c.Set(0, out)
	return nil
}

// elemScalarLike makes a one-element tensor of dtype dt holding v.
func elemScalarLike(dt tensor.DType, v float64) *tensor.Tensor {
	t := tensor.New(dt, nil) // a scalar: the process default is fine
	switch d := t.Data.(type) {
	case []float32:
		d[0] = float32(v)
	case []float64:
		d[0] = v
	case []int64:
		d[0] = int64(v)
	case []int32:
		d[0] = int32(v)
	case []int16:
		d[0] = int16(v)
	case []int8:
		d[0] = int8(v)
	case []uint8:
		d[0] = uint8(v)
	case []uint16:
		d[0] = uint16(v)
	case []uint32:
		d[0] = uint32(v)
	case []uint64:
		d[0] = uint64(v)
	}
	return t
}

func elemClipApply[T Number](out, in []T, lo, hi *tensor.Tensor) {
	copy(out, in)
	if lo != nil {
		l := lo.Data.([]T)[0]
		for i, v := range out {
			if v < l {
				out[i] = l
			}
		}
	}
	if hi != nil {
		h := hi.Data.([]T)[0]
		for i, v := range out {
			if v > h {
				out[i] = h
			}
		}
	}
}
