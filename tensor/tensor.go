// Package tensor holds the n-dimensional arrays that flow through vitals:
// a data type, a shape and one typed, row-major (C order) Go slice.
package tensor

import (
	"fmt"
	"math"
)

// DType is an element type. Values follow ONNX's TensorProto.DataType numbering.
type DType int32

// Element types. Float16 and BFloat16 only appear on load; they are widened to Float32.
const (
	Undefined DType = 0
	Float32   DType = 1
	Uint8     DType = 2
	Int8      DType = 3
	Uint16    DType = 4
	Int16     DType = 5
	Int32     DType = 6
	Int64     DType = 7
	String    DType = 8
	Bool      DType = 9
	Float16   DType = 10
	Float64   DType = 11
	Uint32    DType = 12
	Uint64    DType = 13
	BFloat16  DType = 16
)

var dtypeNames = map[DType]string{
	Float32: "float32", Uint8: "uint8", Int8: "int8", Uint16: "uint16", Int16: "int16",
	Int32: "int32", Int64: "int64", String: "string", Bool: "bool", Float16: "float16",
	Float64: "float64", Uint32: "uint32", Uint64: "uint64", BFloat16: "bfloat16",
	// ONNX types the executor does not compute in, named so that errors say which.
	14: "complex64", 15: "complex128", 17: "float8e4m3fn", 18: "float8e4m3fnuz", 19: "float8e5m2",
	20: "float8e5m2fnuz", 21: "uint4", 22: "int4", 23: "float4e2m1", 24: "float8e8m0", 25: "uint2", 26: "int2",
}

func (d DType) String() string {
	if s, ok := dtypeNames[d]; ok {
		return s
	}
	return fmt.Sprintf("dtype(%d)", int32(d))
}

// Supported reports whether the executor computes in this type (float16/bfloat16 are widened on load).
func (d DType) Supported() bool {
	switch d {
	case Float32, Float64, Int64, Int32, Int16, Int8, Uint8, Uint16, Uint32, Uint64, Bool, String:
		return true
	}
	return false
}

// IsFloat reports a floating-point type.
func (d DType) IsFloat() bool { return d == Float32 || d == Float64 || d == Float16 || d == BFloat16 }

// Size is the element size in bytes (strings count as 16, a Go string header).
func (d DType) Size() int {
	switch d {
	case Float32, Int32, Uint32:
		return 4
	case Float64, Int64, Uint64:
		return 8
	case Uint8, Int8, Bool:
		return 1
	case Uint16, Int16, Float16, BFloat16:
		return 2
	case String:
		return 16
	}
	return 0
}

// Tensor is a dense row-major array. Data holds one of []float32, []float64,
// []int64, []int32, []int16, []int8, []uint8, []uint16, []uint32, []uint64,
// []bool, []string, of length Shape.Size().
type Tensor struct {
	DType DType
	Shape []int
	Data  any
}

// MaxElements bounds the element count of any one tensor (2^40, 4 TiB of float32):
// shape products beyond it are refused before allocation.
const MaxElements = 1 << 40

// NumElements is the product of dims, with an error on negative dims or overflow.
func NumElements(shape []int) (int, error) {
	n := 1
	for _, d := range shape {
		if d < 0 {
			return 0, fmt.Errorf("negative dimension %d in shape %v", d, shape)
		}
		if d != 0 && n > MaxElements/d {
			return 0, fmt.Errorf("shape %v has more than %d elements", shape, MaxElements)
		}
		n *= d
	}
	return n, nil
}

// Size is the number of elements (product of Shape; 1 for a scalar).
func (t *Tensor) Size() int {
	n := 1
	for _, d := range t.Shape {
		n *= d
	}
	return n
}

// Rank is len(Shape).
func (t *Tensor) Rank() int { return len(t.Shape) }

// New allocates a zero tensor with the process default budget and no pool
// ((*Arena)(nil).New; kernels allocate from their run's Arena instead).
func New(dt DType, shape []int) *Tensor { return (*Arena)(nil).New(dt, shape) }

// NewUninit is (*Arena)(nil).NewUninit: without a pool, a zeroed tensor.
func NewUninit(dt DType, shape []int) *Tensor { return (*Arena)(nil).NewUninit(dt, shape) }

// MakeSlice allocates a zero slice of n elements of the Go type for dt. Over
// the process default budget it panics with a *BudgetError instead of allocating.
func MakeSlice(dt DType, n int) any { return (*Arena)(nil).MakeSlice(dt, n) }

// makeSlice is make for dt's Go type.
func makeSlice(dt DType, n int) any {
	switch dt {
	case Float32:
		return make([]float32, n)
	case Float64:
		return make([]float64, n)
	case Int64:
		return make([]int64, n)
	case Int32:
		return make([]int32, n)
	case Int16:
		return make([]int16, n)
	case Int8:
		return make([]int8, n)
	case Uint8:
		return make([]uint8, n)
	case Uint16:
		return make([]uint16, n)
	case Uint32:
		return make([]uint32, n)
	case Uint64:
		return make([]uint64, n)
	case Bool:
		return make([]bool, n)
	case String:
		return make([]string, n)
	}
	panic(fmt.Sprintf("tensor: no storage for %v", dt))
}

// DTypeOf returns the dtype of a supported slice type.
func DTypeOf(data any) DType {
	switch data.(type) {
	case []float32:
		return Float32
	case []float64:
		return Float64
	case []int64:
		return Int64
	case []int32:
		return Int32
	case []int16:
		return Int16
	case []int8:
		return Int8
	case []uint8:
		return Uint8
	case []uint16:
		return Uint16
	case []uint32:
		return Uint32
	case []uint64:
		return Uint64
	case []bool:
		return Bool
	case []string:
		return String
	}
	return Undefined
}

// From wraps a slice (no copy) with the given shape.
func From(data any, shape ...int) *Tensor {
	return &Tensor{DType: DTypeOf(data), Shape: append([]int{}, shape...), Data: data}
}

// Scalar returns a rank-0 float32 tensor.
func Scalar(v float32) *Tensor { return From([]float32{v}) }

// F32 returns the float32 data; it panics if the tensor is not float32.
func (t *Tensor) F32() []float32 { return t.Data.([]float32) }

// F64 returns the float64 data.
func (t *Tensor) F64() []float64 { return t.Data.([]float64) }

// I64 returns the int64 data.
func (t *Tensor) I64() []int64 { return t.Data.([]int64) }

// Bools returns the bool data.
func (t *Tensor) Bools() []bool { return t.Data.([]bool) }

// Reshaped returns a tensor sharing t's data with a new shape of equal size.
func (t *Tensor) Reshaped(shape []int) *Tensor {
	return &Tensor{DType: t.DType, Shape: append([]int{}, shape...), Data: t.Data}
}

// Clone deep-copies t.
func (t *Tensor) Clone() *Tensor {
	c := New(t.DType, t.Shape)
	CopyData(c.Data, t.Data)
	return c
}

// CopyData copies src into dst (same Go slice type) and returns the count.
func CopyData(dst, src any) int {
	switch d := dst.(type) {
	case []float32:
		return copy(d, src.([]float32))
	case []float64:
		return copy(d, src.([]float64))
	case []int64:
		return copy(d, src.([]int64))
	case []int32:
		return copy(d, src.([]int32))
	case []int16:
		return copy(d, src.([]int16))
	case []int8:
		return copy(d, src.([]int8))
	case []uint8:
		return copy(d, src.([]uint8))
	case []uint16:
		return copy(d, src.([]uint16))
	case []uint32:
		return copy(d, src.([]uint32))
	case []uint64:
		return copy(d, src.([]uint64))
	case []bool:
		return copy(d, src.([]bool))
	case []string:
		return copy(d, src.([]string))
	}
	panic(fmt.Sprintf("tensor: CopyData on %T", dst))
}

// Float64At reads element i as float64 (for shape/index inputs and reports; not for hot loops).
func (t *Tensor) Float64At(i int) float64 {
	switch d := t.Data.(type) {
	case []float32:
		return float64(d[i])
	case []float64:
		return d[i]
	case []int64:
		return float64(d[i])
	case []int32:
		return float64(d[i])
	case []int16:
		return float64(d[i])
	case []int8:
		return float64(d[i])
	case []uint8:
		return float64(d[i])
	case []uint16:
		return float64(d[i])
	case []uint32:
		return float64(d[i])
	case []uint64:
		return float64(d[i])
	case []bool:
		if d[i] {
			return 1
		}
		return 0
	}
	return math.NaN()
}

// Int64At reads element i as int64 without passing integers through float64
// (which rounds beyond 2^53 and turns INT64_MAX into 2^63, out of range):
// integer types convert exactly (uint64 above INT64_MAX saturates to
// INT64_MAX), floats truncate toward zero and saturate at the int64 limits,
// NaN reads as 0. For shape, count and index tensors.
func (t *Tensor) Int64At(i int) int64 {
	switch d := t.Data.(type) {
	case []int64:
		return d[i]
	case []int32:
		return int64(d[i])
	case []int16:
		return int64(d[i])
	case []int8:
		return int64(d[i])
	case []uint8:
		return int64(d[i])
	case []uint16:
		return int64(d[i])
	case []uint32:
		return int64(d[i])
	case []uint64:
		return int64(min(d[i], math.MaxInt64))
	case []bool:
		if d[i] {
			return 1
		}
		return 0
	}
	return floatToInt64(t.Float64At(i))
}

// floatToInt64 truncates f toward zero, saturating at the int64 limits
// (2^63 itself is out of range: float64(math.MaxInt64) rounds up to it); NaN is 0.
func floatToInt64(f float64) int64 {
	switch {
	case f != f:
		return 0
	case f >= 1<<63:
		return math.MaxInt64
	case f <= -(1 << 63):
		return math.MinInt64
	}
	return int64(f)
}

// Ints returns the elements as []int (for shape, axes and index tensors),
// read exactly through Int64At.
func (t *Tensor) Ints() []int {
	n := t.Size()
	out := make([]int, n)
	switch d := t.Data.(type) {
	case []int64:
		for i, v := range d {
			out[i] = int(v)
		}
	case []int32:
		for i, v := range d {
			out[i] = int(v)
		}
	default:
		for i := range out {
			out[i] = int(t.Int64At(i))
		}
	}
	return out
}

// String renders dtype and shape, e.g. "float32[1 3 224 224]".
func (t *Tensor) String() string { return fmt.Sprintf("%v%v", t.DType, t.Shape) }

// Strides returns row-major strides in elements.
func Strides(shape []int) []int {
	s := make([]int, len(shape))
	acc := 1
	for i := len(shape) - 1; i >= 0; i-- {
		s[i] = acc
		acc *= shape[i]
	}
	return s
}

// SameShape reports equal shapes.
func SameShape(a, b []int) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}
