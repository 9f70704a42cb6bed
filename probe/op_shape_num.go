package probe

import (
	"cmp"
	"fmt"
	"math"
	"slices"
)

// Typed numeric building blocks shared by the indexing, ordering and
// reduction kernels, picked once per tensor by shapeNumFor.

type shapeNumeric interface {
	// scatter applies dst[offs[i]] = dst[offs[i]] op src[i] for op add, mul, max or min.
	scatter(dst, src any, offs []int, op string) error
	// arg writes, for each [outer, ·, inner] lane along an axis of size n, the
	// position of its largest (or smallest) element; ties pick the first (or last) one.
	arg(src any, out []int64, outer, n, inner int, largest, last bool)
	// topk writes the k largest (or smallest) elements of each lane and their positions, sorted.
	topk(src, vals any, idx []int64, outer, n, inner, k int, largest bool)
	// cumsum writes running sums along each lane (exclusive: without the element itself).
	cumsum(src, dst any, outer, n, inner int, exclusive, reverse bool)
}

type shapeNumT[T Number] struct{}

func shapeNumFor(data any) (shapeNumeric, error) {
	switch data.(type) {
	case []float32:
		return shapeNumT[float32]{}, nil
	case []float64:
		return shapeNumT[float64]{}, nil
	case []int64:
		return shapeNumT[int64]{}, nil
	case []int32:
		return shapeNumT[int32]{}, nil
	case []int16:
		return shapeNumT[int16]{}, nil
	case []int8:
		return shapeNumT[int8]{}, nil
	case []uint8:
		return shapeNumT[uint8]{}, nil
	case []uint16:
		return shapeNumT[uint16]{}, nil
	case []uint32:
		return shapeNumT[uint32]{}, nil
	case []uint64:
		return shapeNumT[uint64]{}, nil
	}
	return nil, fmt.Errorf("expects a numeric tensor, got %T", data)
}

func (shapeNumT[T]) scatter(dst, src any, offs []int, op string) error {
	d, s := dst.([]T), src.([]T)
	switch op {
	case "add":
		for i, o := range offs {
			d[o] += s[i]
		}
	case "mul":
		for i, o := range offs {
			d[o] *= s[i]
		}
	case "max":
		for i, o := range offs {
			d[o] = max(d[o], s[i])
		}
	case "min":
		for i, o := range offs {
			d[o] = min(d[o], s[i])
		}
	default:
		return fmt.Errorf("unknown reduction %q", op)
	}
	return nil
}

func (shapeNumT[T]) arg(src any, out []int64, outer, n, inner int, largest, last bool) {
	x := src.([]T)
	for o := 0; o < outer; o++ {
		for i := 0; i < inner; i++ {
			base := o*n*inner + i
			best, at := x[base], 0
			for j := 1; j < n; j++ {
				v := x[base+j*inner]
				better := v > best
				if !largest {
					better = v < best
				}
				if better || (last && v == best) {
					best, at = v, j
				}
			}
			out[o*inner+i] = int64(at)
		}
	}
}

func (shapeNumT[T]) topk(src, vals any, idx []int64, outer, n, inner, k int, largest bool) {
	x, v := src.([]T), vals.([]T)
	lane := make([]int, n)
	for o := 0; o < outer; o++ {
		for i := 0; i < inner; i++ {
			base := o*n*inner + i
			for j := range lane {
				lane[j] = j
			}
			slices.SortStableFunc(lane, func(a, b int) int {
				c := cmp.Compare(x[base+a*inner], x[base+b*inner])
				if largest {
					return -c
				}
				return c
			})
			ob := o*k*inner + i
			for j := 0; j < k; j++ {
				v[ob+j*inner] = x[base+lane[j]*inner]
				idx[ob+j*inner] = int64(lane[j])
			}
		}
	}
}

func (shapeNumT[T]) cumsum(src, dst any, outer, n, inner int, exclusive, reverse bool) {
	x, y := src.([]T), dst.([]T)
	for o := 0; o < outer; o++ {
		for i := 0; i < inner; i++ {
			base := o*n*inner + i
			var acc T
			for s := 0; s < n; s++ {
				j := s
				if reverse {
					j = n - 1 - s
				}
				p := base + j*inner
				if exclusive {
					y[p] = acc
					acc += x[p]
				} else {
					acc += x[p]
					y[p] = acc
				}
			}
		}
	}
}

// numLimits returns the lowest and highest values of T (±Inf for floats).
func numLimits[T Number]() (lo, hi T) {
	var z T
	switch any(z).(type) {
	case float32, float64:
		l, h := math.Inf(-1), math.Inf(1)
		return T(l), T(h)
	case int64:
		l, h := int64(math.MinInt64), int64(math.MaxInt64)
		return T(l), T(h)
	case int32:
		l, h := int64(math.MinInt32), int64(math.MaxInt32)
		return T(l), T(h)
	case int16:
		l, h := int64(math.MinInt16), int64(math.MaxInt16)
		return T(l), T(h)
	case int8:
		l, h := int64(math.MinInt8), int64(math.MaxInt8)
		return T(l), T(h)
	}
	// unsigned: 0 and all bits set (0 - 1 wraps)
	return z, z - 1
}
