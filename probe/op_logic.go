package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Comparison and logic with multidirectional broadcasting (legacy broadcast/axis
// attributes before opset 7): Equal Less Greater LessOrEqual GreaterOrEqual
// (bool outputs), And Or Xor Not on bool, IsNaN, IsInf, Where, BitShift.

func init() {
	reg("Equal", elemCompareKernel(elemEq), 1, 7, 11, 13, 19)
	reg("Less", elemCompareKernel(elemLt), 1, 7, 9, 13)
	reg("Greater", elemCompareKernel(elemGt), 1, 7, 9, 13)
	reg("LessOrEqual", elemCompareKernel(elemLe), 12, 16)
	reg("GreaterOrEqual", elemCompareKernel(elemGe), 12, 16)
	reg("And", elemBoolKernel(func(x, y bool) bool { return x && y }), 1, 7)
	reg("Or", elemBoolKernel(func(x, y bool) bool { return x || y }), 1, 7)
	reg("Xor", elemBoolKernel(func(x, y bool) bool { return x != y }), 1, 7)
	reg("Not", elemNot, 1)
	reg("IsNaN", elemIsNaN, 9, 13, 20)
	reg("IsInf", elemIsInf, 10, 20)
	reg("Where", elemWhere, 9, 16)
	reg("BitShift", elemBitShift, 11)
}

type elemCmpOp int

const (
	elemEq elemCmpOp = iota // a == b
	elemLt                  // a < b
	elemGt                  // a > b
	elemLe                  // a <= b
	elemGe                  // a >= b
)

// elemCompareKernel: y[i] = a[i] op b[i] as bool, over the broadcast shape.
func elemCompareKernel(op elemCmpOp) Kernel {
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
		out := c.Arena().New(tensor.Bool, os)
		o := out.Bools()
		switch x := a.Data.(type) {
		case []float32:
			elemCompare(op, o, os, x, a.Shape, b.F32(), b.Shape)
		case []float64:
			elemCompare(op, o, os, x, a.Shape, b.F64(), b.Shape)
		case []int64:
			elemCompare(op, o, os, x, a.Shape, b.I64(), b.Shape)
		case []int32:
			elemCompare(op, o, os, x, a.Shape, b.Data.([]int32), b.Shape)
		case []int16:
			elemCompare(op, o, os, x, a.Shape, b.Data.([]int16), b.Shape)
		case []int8:
			elemCompare(op, o, os, x, a.Shape, b.Data.([]int8), b.Shape)
		case []uint8:
			elemCompare(op, o, os, x, a.Shape, b.Data.([]uint8), b.Shape)
		case []uint16:
			elemCompare(op, o, os, x, a.Shape, b.Data.([]uint16), b.Shape)
		case []uint32:
			elemCompare(op, o, os, x, a.Shape, b.Data.([]uint32), b.Shape)
		case []uint64:
			elemCompare(op, o, os, x, a.Shape, b.Data.([]uint64), b.Shape)
		case []bool:
			if op != elemEq {
				return fmt.Errorf("unsupported input type %v", a.DType)
			}
			binaryLoop(o, os, x, a.Shape, b.Bools(), b.Shape, func(x, y bool) bool { return x == y })
		case []string:
			if op != elemEq {
				return fmt.Errorf("unsupported input type %v", a.DType)
			}
			binaryLoop(o, os, x, a.Shape, b.Data.([]string), b.Shape, func(x, y string) bool { return x == y })
		default:
			return fmt.Errorf("unsupported input type %v", a.DType)
		}
		c.Set(0, out)
		return nil
	}
}

func elemCompare[T Number](op elemCmpOp, out []bool, os []int, a []T, as []int, b []T, bs []int) {
	switch op {
	case elemEq:
		binaryLoop(out, os, a, as, b, bs, func(x, y T) bool { return x == y })
	case elemLt:
		binaryLoop(out, os, a, as, b, bs, func(x, y T) bool { return x < y })
	case elemGt:
		binaryLoop(out, os, a, as, b, bs, func(x, y T) bool { return x > y })
	case elemLe:
		binaryLoop(out, os, a, as, b, bs, func(x, y T) bool { return x <= y })
	case elemGe:
		binaryLoop(out, os, a, as, b, bs, func(x, y T) bool { return x >= y })
	}
}

// elemBoolKernel: y = f(a, b) on bool tensors, broadcasting.
func elemBoolKernel(f func(x, y bool) bool) Kernel {
	return func(c *Call) error {
		if err := c.Need(2); err != nil {
			return err
		}
		a, b := c.In[0], legacyBroadcast(c, c.In[0], c.In[1])
		if a.DType != tensor.Bool || b.DType != tensor.Bool {
			return fmt.Errorf("expects bool inputs, got %v and %v", a.DType, b.DType)
		}
		os, err := Broadcast(a.Shape, b.Shape)
		if err != nil {
			return err
		}
		out := c.Arena().New(tensor.Bool, os)
		binaryLoop(out.Bools(), os, a.Bools(), a.Shape, b.Bools(), b.Shape, f)
		c.Set(0, out)
		return nil
	}
}

// Not: y = !x.
func elemNot(c *Call) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	if x.DType != tensor.Bool {
		return fmt.Errorf("expects a bool input, got %v", x.DType)
	}
	out := c.Arena().New(tensor.Bool, x.Shape)
	o := out.Bools()
	for i, v := range x.Bools() {
		o[i] = !v
	}
	c.Set(0, out)
	return nil
}

// IsNaN: y = (x is NaN).
func elemIsNaN(c *Call) error {
	return elemFloatTest(c, func(v float64) bool { return v != v })
}

// IsInf: y = (x is +Inf and detect_positive) or (x is -Inf and detect_negative); both default 1.
func elemIsInf(c *Call) error {
	pos, neg := c.Int("detect_positive", 1) != 0, c.Int("detect_negative", 1) != 0
	return elemFloatTest(c, func(v float64) bool {
		return (pos && math.IsInf(v, 1)) || (neg && math.IsInf(v, -1))
	})
}

// elemFloatTest maps a float tensor to bool with pred.
func elemFloatTest(c *Call, pred func(float64) bool) error {
	if err := c.Need(1); err != nil {
		return err
	}
	x := c.In[0]
	out := c.Arena().New(tensor.Bool, x.Shape)
	o := out.Bools()
	switch d := x.Data.(type) {
	case []float32:
		for i, v := range d {
			o[i] = pred(float64(v))
		}
	case []float64:
		for i, v := range d {
			o[i] = pred(v)
		}
	default:
		return fmt.Errorf("expects a float input, got %v", x.DType)
	}
	c.Set(0, out)
	return nil
}

// Where: y = condition ? x : y, with condition, x and y broadcast together.
func elemWhere(c *Call) error {
	if err := c.Need(3); err != nil {
		return err
	}
	cond, x, y := c.In[0], c.In[1], c.In[2]
	if cond.DType != tensor.Bool {
		return fmt.Errorf("condition must be bool, got %v", cond.DType)
	}
	if x.DType != y.DType {
		return fmt.Errorf("X and Y types differ: %v and %v", x.DType, y.DType)
	}
	os, err := Broadcast(cond.Shape, x.Shape, y.Shape)
	if err != nil {
		return err
	}
	out := c.Arena().New(x.DType, os)
	cb := cond.Bools()
	switch d := out.Data.(type) {
	case []float32:
		elemWhereLoop(d, os, cb, cond.Shape, x.F32(), x.Shape, y.F32(), y.Shape)
	case []float64:
		elemWhereLoop(d, os, cb, cond.Shape, x.F64(), x.Shape, y.F64(), y.Shape)
	case []int64:
		elemWhereLoop(d, os, cb, cond.Shape, x.I64(), x.Shape, y.I64(), y.Shape)
	case []int32:
		elemWhereLoop(d, os, cb, cond.Shape, x.Data.([]int32), x.Shape, y.Data.([]int32), y.Shape)
	case []int16:
		elemWhereLoop(d, os, cb, cond.Shape, x.Data.([]int16), x.Shape, y.Data.([]int16), y.Shape)
	case []int8:
		elemWhereLoop(d, os, cb, cond.Shape, x.Data.([]int8), x.Shape, y.Data.([]int8), y.Shape)
	case []uint8:
		elemWhereLoop(d, os, cb, cond.Shape, x.Data.([]uint8), x.Shape, y.Data.([]uint8), y.Shape)
	case []uint16:
		elemWhereLoop(d, os, cb, cond.Shape, x.Data.([]uint16), x.Shape, y.Data.([]uint16), y.Shape)
	case []uint32:
		elemWhereLoop(d, os, cb, cond.Shape, x.Data.([]uint32), x.Shape, y.Data.([]uint32), y.Shape)
	case []uint64:
		elemWhereLoop(d, os, cb, cond.Shape, x.Data.([]uint64), x.Shape, y.Data.([]uint64), y.Shape)
	case []bool:
		elemWhereLoop(d, os, cb, cond.Shape, x.Bools(), x.Shape, y.Bools(), y.Shape)
	case []string:
		elemWhereLoop(d, os, cb, cond.Shape, x.Data.([]string), x.Shape, y.Data.([]string), y.Shape)
	default:
		return fmt.Errorf("unsupported input type %v", x.DType)
	}
	c.Set(0, out)
	return nil
}

// elemWhereLoop fills out (shape os) from x or y by cond, each laid over os
// with broadcast strides; the innermost axis runs as a strided loop.
func elemWhereLoop[T any](out []T, os []int, cond []bool, cs []int, x []T, xs []int, y []T, ys []int) {
	n := len(out)
	if n == 0 {
		return
	}
	if len(cond) == n && len(x) == n && len(y) == n {
		for i, c := range cond {
			if c {
				out[i] = x[i]
			} else {
				out[i] = y[i]
			}
		}
		return
	}
	rank := len(os)
	sc, sx, sy := BroadcastStrides(cs, os), BroadcastStrides(xs, os), BroadcastStrides(ys, os)
	inner := os[rank-1]
	dc, dx, dy := sc[rank-1], sx[rank-1], sy[rank-1]
	idx := make([]int, rank)
	ic, ix, iy := 0, 0, 0
	for o := 0; o < n; o += inner {
		pc, px, py := ic, ix, iy
		for j := o; j < o+inner; j++ {
			if cond[pc] {
				out[j] = x[px]
			} else {
				out[j] = y[py]
			}
			pc += dc
			px += dx
			py += dy
		}
		for ax := rank - 2; ax >= 0; ax-- {
			idx[ax]++
			ic += sc[ax]
			ix += sx[ax]
			iy += sy[ax]
			if idx[ax] < os[ax] {
				break
			}
			ic -= sc[ax] * os[ax]
			ix -= sx[ax] * os[ax]
			iy -= sy[ax] * os[ax]
			idx[ax] = 0
		}
	}
}

// BitShift: y = x << s (direction "LEFT") or x >> s ("RIGHT") on unsigned
// integers, broadcasting; shifting by the bit width or more gives 0.
func elemBitShift(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	a, b := c.In[0], c.In[1]
	if a.DType != b.DType {
		return fmt.Errorf("input types differ: %v and %v", a.DType, b.DType)
	}
	var left bool
	switch dir := c.Str("direction", ""); dir {
	case "LEFT":
		left = true
	case "RIGHT":
	default:
		return fmt.Errorf("direction %q is not \"LEFT\" or \"RIGHT\"", dir)
	}
	os, err := Broadcast(a.Shape, b.Shape)
	if err != nil {
		return err
	}
	out := c.Arena().New(a.DType, os)
	switch x := a.Data.(type) {
	case []uint8:
		elemShift(left, out.Data.([]uint8), os, x, a.Shape, b.Data.([]uint8), b.Shape)
	case []uint16:
		elemShift(left, out.Data.([]uint16), os, x, a.Shape, b.Data.([]uint16), b.Shape)
	case []uint32:
		elemShift(left, out.Data.([]uint32), os, x, a.Shape, b.Data.([]uint32), b.Shape)
	case []uint64:
		elemShift(left, out.Data.([]uint64), os, x, a.Shape, b.Data.([]uint64), b.Shape)
	default:
		return fmt.Errorf("expects unsigned integer inputs, got %v", a.DType)
	}
	c.Set(0, out)
	return nil
}

func elemShift[T ~uint8 | ~uint16 | ~uint32 | ~uint64](left bool, out []T, os []int, a []T, as []int, b []T, bs []int) {
	if left {
		binaryLoop(out, os, a, as, b, bs, func(x, s T) T { return x << s })
	} else {
		binaryLoop(out, os, a, as, b, bs, func(x, s T) T { return x >> s })
	}
}
