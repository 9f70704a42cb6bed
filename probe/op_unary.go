package probe

import (
	"fmt"
	"math"
)

// Elementwise unary math: y = f(x) for every element.
// float32 inputs are computed through the float64 math library and rounded
// back; Neg, Abs and Sign also accept every integer type.

func init() {
	f := func(g func(float64) float64) Kernel { return unaryFloat(elemVia64(g), g) }
	reg("Sqrt", unaryF32Kernel(math.Sqrt, sqrtF32), 1, 6, 13)
	reg("Exp", unaryF32Kernel(math.Exp, expF32), 1, 6, 13)
	reg("Log", unaryF32Kernel(math.Log, logF32), 1, 6, 13)
	reg("Reciprocal", unaryF32Kernel(func(x float64) float64 { return 1 / x }, reciprocalF32), 1, 6, 13)
	reg("Floor", f(math.Floor), 1, 6, 13)
	reg("Ceil", f(math.Ceil), 1, 6, 13)
	reg("Round", f(math.RoundToEven), 11) // halves round to even
	reg("Sin", f(math.Sin), 7)
	reg("Cos", f(math.Cos), 7)
	reg("Tan", f(math.Tan), 7)
	reg("Asin", f(math.Asin), 7)
	reg("Acos", f(math.Acos), 7)
	reg("Atan", f(math.Atan), 7)
	reg("Sinh", f(math.Sinh), 9)
	reg("Cosh", f(math.Cosh), 9)
	reg("Asinh", f(math.Asinh), 9)
	reg("Acosh", f(math.Acosh), 9)
	reg("Atanh", f(math.Atanh), 9)
	reg("Erf", unaryF32Kernel(math.Erf, erfF32), 9, 13)
	reg("Neg", elemSignedKernel(elemNeg), 1, 6, 13)
	reg("Abs", elemSignedKernel(elemAbs), 1, 6, 13)
	reg("Sign", elemSignedKernel(elemSign), 9, 13)
}

// elemVia64 lifts a float64 function to float32.
func elemVia64(g func(float64) float64) func(float32) float32 {
	return func(x float32) float32 { return float32(g(float64(x))) }
}

type elemSignedOp int

const (
	elemNeg  elemSignedOp = iota // y = -x
	elemAbs                      // y = |x|
	elemSign                     // y = -1, 0 or 1 by the sign of x (NaN stays NaN)
)

// elemSignedKernel builds Neg/Abs/Sign for every numeric type.
func elemSignedKernel(op elemSignedOp) Kernel {
	return func(c *Call) error {
		if err := c.Need(1); err != nil {
			return err
		}
		x := c.In[0]
		out := c.Arena().New(x.DType, x.Shape)
		switch d := x.Data.(type) {
		case []float32:
			elemSignedApply(op, out.F32(), d)
		case []float64:
			elemSignedApply(op, out.F64(), d)
		case []int64:
			elemSignedApply(op, out.I64(), d)
		case []int32:
			elemSignedApply(op, out.Data.([]int32), d)
		case []int16:
			elemSignedApply(op, out.Data.([]int16), d)
		case []int8:
			elemSignedApply(op, out.Data.([]int8), d)
		case []uint8:
			elemSignedApply(op, out.Data.([]uint8), d)
		case []uint16:
			elemSignedApply(op, out.Data.([]uint16), d)
		case []uint32:
			elemSignedApply(op, out.Data.([]uint32), d)
		case []uint64:
			elemSignedApply(op, out.Data.([]uint64), d)
		default:
			return fmt.Errorf("unsupported input type %v", x.DType)
		}
		c.Set(0, out)
		return nil
	}
}

func elemSignedApply[T Number](op elemSignedOp, out, in []T) {
	var zero T
	switch op {
	case elemNeg:
		for i, v := range in {
			out[i] = zero - v
		}
	case elemAbs:
		for i, v := range in {
			if v < 0 {
				v = zero - v
			}
			out[i] = v
		}
	case elemSign:
		for i, v := range in {
			switch {
			case v > 0:
				out[i] = 1
			case v < 0:
				out[i] = zero - 1
			default:
				out[i] = v // 0 (or NaN for floats)
			}
		}
	}
}
