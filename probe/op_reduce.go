package probe

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Reductions over a set of axes, and ArgMax/ArgMin along one axis.
// With n the number of reduced elements x_i of one output element:
//
//	ReduceSum       Σ x_i                ReduceMean      Σ x_i / n
//	ReduceProd      Π x_i                ReduceSumSquare Σ x_i²
//	ReduceL1        Σ |x_i|              ReduceL2        √(Σ x_i²)
//	ReduceLogSum    log Σ x_i            ReduceLogSumExp m + log Σ exp(x_i - m), m = max x_i
//	ReduceMax       max x_i (-Inf on an empty set)   ReduceMin min x_i (+Inf on an empty set)
//
// Axes come from the "axes" attribute, or from input 1 from opset 13 (ReduceSum)
// or 18 (the others). Without axes every axis is reduced, unless
// noop_with_empty_axes=1, which reduces over no axis (each element on its own).
// Float inputs accumulate in float64.

type reduceKind int

const (
	redSum reduceKind = iota
	redMean
	redProd
	redMax
	redMin
	redL1
	redL2
	redSumSquare
	redLogSum
	redLogSumExp
)

func init() {
	reg("ReduceSum", reduceKernel(redSum, 13), 1, 11, 13)
	reg("ReduceMean", reduceKernel(redMean, 18), 1, 11, 13, 18)
	reg("ReduceProd", reduceKernel(redProd, 18), 1, 11, 13, 18)
	reg("ReduceMax", reduceKernel(redMax, 18), 1, 11, 12, 13, 18, 20)
	reg("ReduceMin", reduceKernel(redMin, 18), 1, 11, 12, 13, 18, 20)
	reg("ReduceL1", reduceKernel(redL1, 18), 1, 11, 13, 18)
	reg("ReduceL2", reduceKernel(redL2, 18), 1, 11, 13, 18)
	reg("ReduceSumSquare", reduceKernel(redSumSquare, 18), 1, 11, 13, 18)
	reg("ReduceLogSum", reduceKernel(redLogSum, 18), 1, 11, 13, 18)
	reg("ReduceLogSumExp", reduceKernel(redLogSumExp, 18), 1, 11, 13, 18)
	reg("ArgMax", argKernel(true), 1, 11, 12, 13)
	reg("ArgMin", argKernel(false), 1, 11, 12, 13)
}

func reduceKernel(kind reduceKind, axesInputSince int) Kernel {
	return func(c *Call) error {
		if err := c.Need(1); err != nil {
			return err
		}
		x := c.In[0]
		var axes []int
		if c.Opset >= axesInputSince {
			a, _, err := shapeIntsInput(c, 1)
			if err != nil {
				return err
			}
			axes = a
		} else {
			axes = c.Ints("axes")
		}
		r := x.Rank()
		red := make([]bool, r)
		if len(axes) == 0 {
			if c.Int("noop_with_empty_axes", 0) == 0 {
				for i := range red {
					red[i] = true
				}
			}
		} else {
			ax, err := shapeAxes(axes, r)
			if err != nil {
				return err
			}
			for _, a := range ax {
				red[a] = true
			}
		}
		kept := make([]int, r)
		var shape []int
		for i, d := range x.Shape {
			kept[i] = d
			if red[i] {
				kept[i] = 1
			}
			if !red[i] || c.Int("keepdims", 1) == 1 {
				shape = append(shape, kept[i])
			}
		}
		if shape == nil {
			shape = []int{}
		}
		n, err := tensor.NumElements(kept)
		if err != nil {
			return err
		}
		var data any
		switch v := x.Data.(type) {
		case []float32:
			data = reduceRun[float32, float64](v, x.Shape, kept, red, n, kind)
		case []float64:
			data = reduceRun[float64, float64](v, x.Shape, kept, red, n, kind)
		case []int64:
			data = reduceRun[int64, int64](v, x.Shape, kept, red, n, kind)
		case []int32:
			data = reduceRun[int32, int64](v, x.Shape, kept, red, n, kind)
		case []int16:
			data = reduceRun[int16, int64](v, x.Shape, kept, red, n, kind)
		case []int8:
			data = reduceRun[int8, int64](v, x.Shape, kept, red, n, kind)
		case []uint8:
			data = reduceRun[uint8, int64](v, x.Shape, kept, red, n, kind)
		case []uint16:
			data = reduceRun[uint16, int64](v, x.Shape, kept, red, n, kind)
		case []uint32:
			data = reduceRun[uint32, int64](v, x.Shape, kept, red, n, kind)
		case []uint64:
			data = reduceRun[uint64, uint64](v, x.Shape, kept, red, n, kind)
		case []bool:
			if kind != redMax && kind != redMin {
				return fmt.Errorf("expects a numeric tensor, got bool")
			}
			// max is "any", min is "all"; the empty set gives false / true.
			init := kind == redMin
			acc := make([]bool, n)
			for i := range acc {
				acc[i] = init
			}
			reduceAcc(v, x.Shape, kept, red, acc, func(a, b bool) bool {
				if init {
					return a && b
				}
				return a || b
			})
			data = acc
		default:
			return fmt.Errorf("unsupported type %v", x.DType)
		}
		c.Set(0, &tensor.Tensor{DType: x.DType, Shape: shape, Data: data})
		return nil
	}
}

// reduceRun reduces x (shape) to kept (reduced axes of size 1) with accumulator type A.
func reduceRun[T, A Number](x []T, shape, kept []int, red []bool, n int, kind reduceKind) []T {
	acc := make([]A, n)
	count := 1
	for i, d := range shape {
		if red[i] {
			count *= d
		}
	}
	lo, hi := numLimits[T]()
	var op func(a A, v T) A
	switch kind {
	case redSum, redMean, redLogSum:
		op = func(a A, v T) A { return a + A(v) }
	case redSumSquare, redL2:
		op = func(a A, v T) A { return a + A(v)*A(v) }
	case redL1:
		op = func(a A, v T) A {
			if v < 0 {
				return a - A(v)
			}
			return a + A(v)
		}
	case redProd:
		for i := range acc {
			acc[i] = 1
		}
		op = func(a A, v T) A { return a * A(v) }
	case redMax, redLogSumExp:
		for i := range acc {
			acc[i] = A(lo)
		}
		op = func(a A, v T) A {
			if A(v) > a || v != v {
				return A(v)
			}
			return a
		}
	case redMin:
		for i := range acc {
			acc[i] = A(hi)
		}
		op = func(a A, v T) A {
			if A(v) < a || v != v {
				return A(v)
			}
			return a
		}
	}
	if !reduceSumF32(x, shape, kept, red, acc, kind) {
		reduceAcc(x, shape, kept, red, acc, op)
	}
	out := make([]T, n)
	switch kind {
	case redMean:
		for i, a := range acc {
			if count == 0 {
				out[i] = T(math.NaN())
				continue
			}
			out[i] = T(float64(a) / float64(count))
		}
	case redL2:
		for i, a := range acc {
			out[i] = T(math.Sqrt(float64(a)))
		}
	case redLogSum:
		for i, a := range acc {
			out[i] = T(math.Log(float64(a)))
		}
	case redLogSumExp:
		// second pass: Σ exp(x - m) around the per-output maximum m
		sum := make([]float64, n)
		mx := make([]float64, n)
		for i, a := range acc {
			mx[i] = float64(a)
			if math.IsInf(mx[i], 0) {
				mx[i] = 0
			}
		}
		reduceRows(shape, kept, red, func(i, m, o int, scalar bool) {
			row := x[i : i+m]
			if scalar {
				s, sh := sum[o], mx[o]
				for _, v := range row {
					s += math.Exp(float64(v) - sh)
				}
				sum[o] = s
				return
			}
			for j, v := range row {
				sum[o+j] += math.Exp(float64(v) - mx[o+j])
			}
		})
		for i := range out {
			out[i] = T(mx[i] + math.Log(sum[i]))
		}
	default:
		for i, a := range acc {
			out[i] = T(a)
		}
	}
	return out
}

// reduceAcc folds every element of x into acc[o] with op, o being its output position.
func reduceAcc[T, A any](x []T, shape, kept []int, red []bool, acc []A, op func(A, T) A) {
	reduceRows(shape, kept, red, func(i, n, o int, scalar bool) {
		row := x[i : i+n]
		if scalar {
			a := acc[o]
			for _, v := range row {
				a = op(a, v)
			}
			acc[o] = a
			return
		}
		dst := acc[o : o+n]
		for j, v := range row {
			dst[j] = op(dst[j], v)
		}
	})
}

// reduceRows walks a contiguous tensor of shape row by row (innermost axis after
// merging): f gets the row's input start i, length n and output start o; scalar
// says the whole row reduces into out[o], otherwise element j goes to out[o+j].
func reduceRows(shape, kept []int, red []bool, f func(i, n, o int, scalar bool)) {
	total := 1
	for _, d := range shape {
		total *= d
	}
	if total == 0 {
		return
	}
	ost := tensor.Strides(kept)
	for i := range ost {
		if red[i] {
			ost[i] = 0
		}
	}
	dims, ost, _ := shapeCoalesce(shape, ost, tensor.Strides(shape))
	rank := len(dims)
	if rank == 0 {
		f(0, 1, 0, true)
		return
	}
	inner, scalar := dims[rank-1], ost[rank-1] == 0
	idx := make([]int, rank)
	o := 0
	for i := 0; i < total; i += inner {
		f(i, inner, o, scalar)
		for ax := rank - 2; ax >= 0; ax-- {
			idx[ax]++
			o += ost[ax]
			if idx[ax] < dims[ax] {
				break
			}
			o -= ost[ax] * dims[ax]
			idx[ax] = 0
		}
	}
}

// argKernel: the position of the largest (ArgMax) or smallest (ArgMin) element
// along axis, as int64; ties pick the first, or the last with select_last_index=1.
func argKernel(largest bool) Kernel {
	return func(c *Call) error {
		if err := c.Need(1); err != nil {
			return err
		}
		x := c.In[0]
		axis, err := NormAxis(int(c.Int("axis", 0)), x.Rank())
		if err != nil {
			return err
		}
		if x.Rank() == 0 || x.Shape[axis] == 0 {
			return fmt.Errorf("cannot take the arg-extremum over an empty axis (shape %v)", x.Shape)
		}
		num, err := shapeNumFor(x.Data)
		if err != nil {
			return err
		}
		outer, inner := 1, 1
		var shape []int
		for a, d := range x.Shape {
			switch {
			case a < axis:
				outer *= d
			case a > axis:
				inner *= d
			}
			if a != axis {
				shape = append(shape, d)
			} else if c.Int("keepdims", 1) == 1 {
				shape = append(shape, 1)
			}
		}
		if shape == nil {
			shape = []int{}
		}
		out := make([]int64, outer*inner)
		num.arg(x.Data, out, outer, x.Shape[axis], inner, largest, c.Int("select_last_index", 0) == 1)
		c.Set(0, tensor.From(out, shape...))
		return nil
	}
}

// reduceSumF32 is reduceAcc for the sums (ReduceSum, ReduceMean,
// ReduceLogSum) of float32 data into float64 accumulators, without a call
// per value: the same additions in the same order. It reports whether it
// ran (other kinds and types are left to reduceAcc).
func reduceSumF32[T, A any](x []T, shape, kept []int, red []bool, acc []A, kind reduceKind) bool {
	if kind != redSum && kind != redMean && kind != redLogSum {
		return false
	}
	xf, ok := any(x).([]float32)
	if !ok {
		return false
	}
	af, ok := any(acc).([]float64)
	if !ok {
		return false
	}
	reduceRows(shape, kept, red, func(i, n, o int, scalar bool) {
		row := xf[i : i+n]
		if scalar {
			a := af[o]
			for _, v := range row {
				a += float64(v)
			}
			af[o] = a
			return
		}
		dst := af[o : o+n]
		for j, v := range row {
			dst[j] += float64(v)
		}
	})
	return true
}
