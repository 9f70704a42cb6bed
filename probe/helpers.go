package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Number is every numeric element type the executor computes in.
type Number interface {
	~float32 | ~float64 | ~int64 | ~int32 | ~int16 | ~int8 | ~uint8 | ~uint16 | ~uint32 | ~uint64
}

// Integer is the integer element types.
type Integer interface {
	~int64 | ~int32 | ~int16 | ~int8 | ~uint8 | ~uint16 | ~uint32 | ~uint64
}

// Float is the floating-point element types.
type Float interface{ ~float32 | ~float64 }

// Broadcast returns the multidirectional (NumPy-style) broadcast of shapes.
func Broadcast(shapes ...[]int) ([]int, error) {
	rank := 0
	for _, s := range shapes {
		rank = max(rank, len(s))
	}
	out := make([]int, rank)
	for i := range out {
		out[i] = 1
	}
	for _, s := range shapes {
		off := rank - len(s)
		for i, d := range s {
			o := out[off+i]
			switch {
			case o == d || d == 1:
			case o == 1:
				out[off+i] = d
			default:
				return nil, fmt.Errorf("shapes %v cannot be broadcast together", shapes)
			}
		}
	}
	return out, nil
}

// BroadcastStrides gives strides of shape (row-major) laid over outShape,
// with 0 where shape is broadcast along that axis.
func BroadcastStrides(shape, outShape []int) []int {
	st := make([]int, len(outShape))
	src := tensor.Strides(shape)
	off := len(outShape) - len(shape)
	for i, d := range shape {
		if d != 1 {
			st[off+i] = src[i]
		}
	}
	return st
}

// binaryLoop computes out[i] = f(a[ia], b[ib]) over the broadcast outShape.
// The innermost axis runs as a tight loop with fixed strides.
func binaryLoop[T, U any](out []U, outShape []int, a []T, aShape []int, b []T, bShape []int, f func(x, y T) U) {
	n := len(out)
	if n == 0 {
		return
	}
	if len(a) == n && len(b) == n {
		for i := range out {
			out[i] = f(a[i], b[i])
		}
		return
	}
	if len(b) == 1 && len(a) == n {
		y := b[0]
		for i := range out {
			out[i] = f(a[i], y)
		}
		return
	}
	if len(a) == 1 && len(b) == n {
		x := a[0]
		for i := range out {
			out[i] = f(x, b[i])
		}
		return
	}
	rank := len(outShape)
	sa := BroadcastStrides(aShape, outShape)
	sb := BroadcastStrides(bShape, outShape)
	inner := outShape[rank-1]
	ia0, ib0 := sa[rank-1], sb[rank-1]
	idx := make([]int, rank)
	ia, ib := 0, 0
	for o := 0; o < n; o += inner {
		row := out[o : o+inner]
		pa, pb := ia, ib
		for j := range row {
			row[j] = f(a[pa], b[pb])
			pa += ia0
			pb += ib0
		}
		// advance the outer index (all axes but the last)
		for ax := rank - 2; ax >= 0; ax-- {
			idx[ax]++
			ia += sa[ax]
			ib += sb[ax]
			if idx[ax] < outShape[ax] {
				break
			}
			ia -= sa[ax] * outShape[ax]
			ib -= sb[ax] * outShape[ax]
			idx[ax] = 0
		}
	}
}

// BroadcastTo materialises t expanded to outShape (data of the same type).
func BroadcastTo(ar *tensor.Arena, t *tensor.Tensor, outShape []int) *tensor.Tensor {
	n, _ := tensor.NumElements(outShape)
	out := &tensor.Tensor{DType: t.DType, Shape: append([]int{}, outShape...), Data: ar.MakeSlice(t.DType, n)}
	if n == 0 {
		return out
	}
	expandInto(out.Data, t.Data, t.Shape, outShape)
	return out
}

func expandInto(dst, src any, srcShape, outShape []int) {
	switch d := dst.(type) {
	case []float32:
		expandT(d, src.([]float32), srcShape, outShape)
	case []float64:
		expandT(d, src.([]float64), srcShape, outShape)
	case []int64:
		expandT(d, src.([]int64), srcShape, outShape)
	case []int32:
		expandT(d, src.([]int32), srcShape, outShape)
	case []int16:
		expandT(d, src.([]int16), srcShape, outShape)
	case []int8:
		expandT(d, src.([]int8), srcShape, outShape)
	case []uint8:
		expandT(d, src.([]uint8), srcShape, outShape)
	case []uint16:
		expandT(d, src.([]uint16), srcShape, outShape)
	case []uint32:
		expandT(d, src.([]uint32), srcShape, outShape)
	case []uint64:
		expandT(d, src.([]uint64), srcShape, outShape)
	case []bool:
		expandT(d, src.([]bool), srcShape, outShape)
	case []string:
		expandT(d, src.([]string), srcShape, outShape)
	default:
		panic(fmt.Sprintf("expand: %T", dst))
	}
}

func expandT[T any](out []T, src []T, srcShape, outShape []int) {
	if len(out) == 0 {
		return // src may be empty too (found by FuzzGraph: Gemm with an empty C)
	}
	if isTrailingBlock(srcShape, outShape) {
		// src is a whole trailing block of out (a Gemm bias row, say): tile it
		for o := 0; o < len(out); o += len(src) {
			copy(out[o:o+len(src)], src)
		}
		return
	}
	binaryLoop(out, outShape, src, srcShape, src[:1], []int{1}, func(x, _ T) T { return x })
}

// isTrailingBlock reports whether srcShape, leading 1s dropped, is a
// suffix of outShape (empty for a one-element src), so that out is src
// repeated whole.
func isTrailingBlock(srcShape, outShape []int) bool {
	i := 0
	for i < len(srcShape) && srcShape[i] == 1 {
		i++
	}
	rest := srcShape[i:]
	if len(rest) > len(outShape) {
		return false
	}
	tail := outShape[len(outShape)-len(rest):]
	for k := range rest {
		if rest[k] != tail[k] {
			return false
		}
	}
	return true
}

// NormAxis maps a possibly negative axis into [0, rank).
func NormAxis(axis, rank int) (int, error) {
	if axis < -rank || axis >= rank || (rank == 0 && axis != 0 && axis != -1) {
		return 0, fmt.Errorf("axis %d out of range for rank %d", axis, rank)
	}
	if axis < 0 {
		axis += rank
	}
	return axis, nil
}

// mapFloat applies f elementwise to a float32 or float64 tensor.
func mapFloat(t *tensor.Tensor, f32 func(float32) float32, f64 func(float64) float64) (*tensor.Tensor, error) {
	switch d := t.Data.(type) {
	case []float32:
		out := make([]float32, len(d))
		f32Map(out, d, func(dst, src []float32) {
			for i, v := range src {
				dst[i] = f32(v)
			}
		})
		return &tensor.Tensor{DType: tensor.Float32, Shape: append([]int{}, t.Shape...), Data: out}, nil
	case []float64:
		out := make([]float64, len(d))
		if f64 == nil {
			for i, v := range d {
				out[i] = float64(f32(float32(v)))
			}
		} else {
			for i, v := range d {
				out[i] = f64(v)
			}
		}
		return &tensor.Tensor{DType: tensor.Float64, Shape: append([]int{}, t.Shape...), Data: out}, nil
	}
	return nil, fmt.Errorf("expects a float tensor, got %v", t.DType)
}

// unaryFloat makes a one-input float kernel from a scalar function
// (f64 may be nil: float64 inputs then go through f32).
func unaryFloat(f32 func(float32) float32, f64 func(float64) float64) Kernel {
	return func(c *Call) error {
		if err := c.Need(1); err != nil {
			return err
		}
		out, err := mapFloat(c.In[0], f32, f64)
		if err != nil {
			return err
		}
		c.Set(0, out)
		return nil
	}
}

// ToFloat32 converts any numeric tensor's data to a new []float32.
func ToFloat32(t *tensor.Tensor) []float32 {
	if d, ok := t.Data.([]float32); ok {
		return d
	}
	out := make([]float32, t.Size())
	for i := range out {
		out[i] = float32(t.Float64At(i))
	}
	return out
}

// shapeOf returns a copy of t's shape.
func shapeOf(t *tensor.Tensor) []int { return append([]int{}, t.Shape...) }

// ScalarInt reads a scalar/1-element integer tensor exactly (never through
// float64, which would turn INT64_MAX into an out-of-range 2^63).
func ScalarInt(t *tensor.Tensor) (int, error) {
	if t.Size() < 1 {
		return 0, fmt.Errorf("expects a scalar, got shape %v", t.Shape)
	}
	return int(t.Int64At(0)), nil
}
