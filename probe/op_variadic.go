package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Variadic elementwise reductions over 1..N inputs, broadcasting all inputs
// together (opset 8+; earlier opsets require equal shapes, which is a special
// case): Max, Min, Sum, Mean.

func init() {
	reg("Max", elemVariadicKernel(elemMaxOp), 1, 6, 8, 12, 13)
	reg("Min", elemVariadicKernel(elemMinOp), 1, 6, 8, 12, 13)
	reg("Sum", elemVariadicKernel(elemSumOp), 1, 6, 8, 13)
	reg("Mean", elemVariadicKernel(elemMeanOp), 1, 6, 8, 13)
}

type elemFoldOp int

const (
	elemMaxOp  elemFoldOp = iota // y = max(x1, ..., xn); NaN propagates
	elemMinOp                    // y = min(x1, ..., xn); NaN propagates
	elemSumOp                    // y = x1 + ... + xn
	elemMeanOp                   // y = (x1 + ... + xn) / n
)

func elemVariadicKernel(op elemFoldOp) Kernel {
	return func(c *Call) error {
		var ins []*tensor.Tensor
		for _, t := range c.In {
			if t != nil {
				ins = append(ins, t)
			}
		}
		if len(ins) == 0 {
			return fmt.Errorf("needs at least one input")
		}
		shapes := make([][]int, len(ins))
		for i, t := range ins {
			if t.DType != ins[0].DType {
				return fmt.Errorf("input types differ: %v and %v", ins[0].DType, t.DType)
			}
			shapes[i] = t.Shape
		}
		os, err := Broadcast(shapes...)
		if err != nil {
			return err
		}
		out := BroadcastTo(c.Arena(), ins[0], os)
		rest := ins[1:]
		switch d := out.Data.(type) {
		case []float32:
			elemFold(op, d, os, rest)
		case []float64:
			elemFold(op, d, os, rest)
		case []int64:
			elemFold(op, d, os, rest)
		case []int32:
			elemFold(op, d, os, rest)
		case []int16:
			elemFold(op, d, os, rest)
		case []int8:
			elemFold(op, d, os, rest)
		case []uint8:
			elemFold(op, d, os, rest)
		case []uint16:
			elemFold(op, d, os, rest)
		case []uint32:
			elemFold(op, d, os, rest)
		case []uint64:
			elemFold(op, d, os, rest)
		default:
			return fmt.Errorf("unsupported input type %v", out.DType)
		}
		c.Set(0, out)
		return nil
	}
}

// elemFold combines each of rest into acc (already holding the first input
// broadcast to os), in place.
func elemFold[T Number](op elemFoldOp, acc []T, os []int, rest []*tensor.Tensor) {
	for _, t := range rest {
		x := t.Data.([]T)
		switch op {
		case elemMaxOp:
			binaryLoop(acc, os, acc, os, x, t.Shape, func(a, b T) T {
				if b > a || b != b {
					return b
				}
				return a
			})
		case elemMinOp:
			binaryLoop(acc, os, acc, os, x, t.Shape, func(a, b T) T {
				if b < a || b != b {
					return b
				}
				return a
			})
		case elemSumOp, elemMeanOp:
			binaryLoop(acc, os, acc, os, x, t.Shape, func(a, b T) T { return a + b })
		}
	}
	if op == elemMeanOp && len(rest) > 0 {
		n := T(len(rest) + 1)
		for i := range acc {
			acc[i] /= n
		}
	}
}
