package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Binary arithmetic with multidirectional broadcasting: Add, Sub, Mul, Div, Pow, Mod.

func init() {
	reg("Add", arith(addT), 1, 6, 7, 13, 14)
	reg("Sub", arith(subT), 1, 6, 7, 13, 14)
	reg("Mul", arith(mulT), 1, 6, 7, 13, 14)
	reg("Div", arith(divT), 1, 6, 7, 13, 14)
	reg("Pow", powKernel, 1, 7, 12, 13, 15)
	reg("Mod", modKernel, 10, 13)
}

type opID int

const (
	addT opID = iota
	subT
	mulT
	divT
)

func applyArith[T Number](op opID, out []T, os []int, a []T, as []int, b []T, bs []int) {
	switch op {
	case addT:
		binaryLoop(out, os, a, as, b, bs, func(x, y T) T { return x + y })
	case subT:
		binaryLoop(out, os, a, as, b, bs, func(x, y T) T { return x - y })
	case mulT:
		binaryLoop(out, os, a, as, b, bs, func(x, y T) T { return x * y })
	case divT:
		binaryLoop(out, os, a, as, b, bs, func(x, y T) T {
			if y == 0 {
				var z T
				if isInt[T]() {
					return z // integer division by zero: defined as 0 here instead of a crash
				}
			}
			return x / y
		})
	}
}

// arithF32 is the float32 broadcasting kernel: the vector fast paths where
// the shapes allow, else the index loop (out may be a or b itself).
func arithF32(op opID, out []float32, os []int, a []float32, as []int, b []float32, bs []int) {
	if !arithF32Fast(op, out, os, a, as, b, bs) && !arithF32Runs(op, out, os, a, as, b, bs) {
		applyArith(op, out, os, a, as, b, bs)
	}
}

func isInt[T Number]() bool {
	var one T = 1
	return one/2 == 0
}

// arith builds a broadcasting binary kernel dispatching on the element type;
// legacy opsets (<7) with broadcast=1 and axis are handled by aligning b to axis.
func arith(op opID) Kernel {
	return func(c *Call) error {
		if err := c.Need(2); err != nil {
			return err
		}
		a, b := c.In[0], legacyBroadcast(c, c.In[0], c.In[1])
		if a.DType != b.DType {
			return fmt.Errorf("input types differ: %v and %v", a.DType, b.DType)
		}
		os, err := Broadcast(a.Shape, b.Shape)
		if err != nil {
			return err
		}
		out := c.Arena().NewUninit(a.DType, os) // every element is written below
		switch x := a.Data.(type) {
		case []float32:
			arithF32(op, out.F32(), os, x, a.Shape, b.F32(), b.Shape)
		case []float64:
			applyArith(op, out.F64(), os, x, a.Shape, b.F64(), b.Shape)
		case []int64:
			applyArith(op, out.I64(), os, x, a.Shape, b.I64(), b.Shape)
		case []int32:
			applyArith(op, out.Data.([]int32), os, x, a.Shape, b.Data.([]int32), b.Shape)
		case []int16:
			applyArith(op, out.Data.([]int16), os, x, a.Shape, b.Data.([]int16), b.Shape)
		case []int8:
			applyArith(op, out.Data.([]int8), os, x, a.Shape, b.Data.([]int8), b.Shape)
		case []uint8:
			applyArith(op, out.Data.([]uint8), os, x, a.Shape, b.Data.([]uint8), b.Shape)
		case []uint16:
			applyArith(op, out.Data.([]uint16), os, x, a.Shape, b.Data.([]uint16), b.Shape)
		case []uint32:
			applyArith(op, out.Data.([]uint32), os, x, a.Shape, b.Data.([]uint32), b.Shape)
		case []uint64:
			applyArith(op, out.Data.([]uint64), os, x, a.Shape, b.Data.([]uint64), b.Shape)
		default:
			return fmt.Errorf("unsupported type %v", a.DType)
		}
		c.Set(0, out)
		return nil
	}
}

// legacyBroadcast implements opset<7 "broadcast"/"axis": b's shape is aligned to a starting at axis.
func legacyBroadcast(c *Call, a, b *tensor.Tensor) *tensor.Tensor {
	if c.Opset >= 7 || c.Int("broadcast", 0) == 0 || !c.Has("axis") {
		return b
	}
	axis := int(c.Int("axis", 0))
	if axis < 0 {
		axis += a.Rank()
	}
	shape := append([]int{}, b.Shape...)
	for len(shape)+axis < a.Rank() {
		shape = append(shape, 1)
	}
	return b.Reshaped(shape)
}

func powKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	a, b := c.In[0], c.In[1]
	os, err := Broadcast(a.Shape, b.Shape)
	if err != nil {
		return err
	}
	out := c.Arena().New(a.DType, os)
	bf := make([]float64, b.Size())
	for i := range bf {
		bf[i] = b.Float64At(i)
	}
	switch x := a.Data.(type) {
	case []float32:
		bb := make([]float32, len(bf))
		for i, v := range bf {
			bb[i] = float32(v)
		}
		binaryLoop(out.F32(), os, x, a.Shape, bb, b.Shape, func(x, y float32) float32 {
			if y == 2 {
				return x * x
			}
			return float32(math.Pow(float64(x), float64(y)))
		})
	case []float64:
		binaryLoop(out.F64(), os, x, a.Shape, bf, b.Shape, math.Pow)
	case []int64:
		bi := make([]int64, len(bf))
		for i, v := range bf {
			bi[i] = int64(v)
		}
		binaryLoop(out.I64(), os, x, a.Shape, bi, b.Shape, func(x, y int64) int64 { return int64(math.Pow(float64(x), float64(y))) })
	case []int32:
		bi := make([]int32, len(bf))
		for i, v := range bf {
			bi[i] = int32(v)
		}
		binaryLoop(out.Data.([]int32), os, x, a.Shape, bi, b.Shape, func(x, y int32) int32 { return int32(math.Pow(float64(x), float64(y))) })
	default:
		return fmt.Errorf("unsupported type %v", a.DType)
	}
	c.Set(0, out)
	return nil
}

func modKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	a, b := c.In[0], c.In[1]
	fmod := c.Int("fmod", 0) == 1
	os, err := Broadcast(a.Shape, b.Shape)
	if err != nil {
		return err
	}
	out := c.Arena().New(a.DType, os)
	switch x := a.Data.(type) {
	case []float32:
		binaryLoop(out.F32(), os, x, a.Shape, b.F32(), b.Shape, func(x, y float32) float32 { return float32(math.Mod(float64(x), float64(y))) })
	case []float64:
		binaryLoop(out.F64(), os, x, a.Shape, b.F64(), b.Shape, math.Mod)
	case []int64:
		modInt(out.I64(), os, x, a.Shape, b.I64(), b.Shape, fmod)
	case []int32:
		modInt(out.Data.([]int32), os, x, a.Shape, b.Data.([]int32), b.Shape, fmod)
	case []int16:
		modInt(out.Data.([]int16), os, x, a.Shape, b.Data.([]int16), b.Shape, fmod)
	case []int8:
		modInt(out.Data.([]int8), os, x, a.Shape, b.Data.([]int8), b.Shape, fmod)
	case []uint8:
		modInt(out.Data.([]uint8), os, x, a.Shape, b.Data.([]uint8), b.Shape, fmod)
	case []uint16:
		modInt(out.Data.([]uint16), os, x, a.Shape, b.Data.([]uint16), b.Shape, fmod)
	case []uint32:
		modInt(out.Data.([]uint32), os, x, a.Shape, b.Data.([]uint32), b.Shape, fmod)
	case []uint64:
		modInt(out.Data.([]uint64), os, x, a.Shape, b.Data.([]uint64), b.Shape, fmod)
	default:
		return fmt.Errorf("unsupported type %v", a.DType)
	}
	c.Set(0, out)
	return nil
}

// modInt: fmod=1 keeps the dividend's sign (C fmod); fmod=0 takes the divisor's sign (Python %).
func modInt[T Integer](out []T, os []int, a []T, as []int, b []T, bs []int, fmod bool) {
	binaryLoop(out, os, a, as, b, bs, func(x, y T) T {
		if y == 0 {
			return 0
		}
		r := x % y
		if !fmod && r != 0 && ((r < 0) != (y < 0)) {
			r += y
		}
		return r
	})
}
