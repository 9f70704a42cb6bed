package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Typed building blocks for the data-movement kernels (shape, gather/scatter,
// slice/pad, reductions). A kernel picks the typed implementation once per
// tensor with shapeOpsFor and then runs plain generic loops: no per-element
// interface calls or type switches.

// shapeMover moves elements of one element type; dst and src are slices of that type.
type shapeMover interface {
	// strided copies the view (sOff, sStr) of src over dims into the view (dOff, dStr) of dst.
	strided(dst any, dOff int, dStr []int, src any, sOff int, sStr []int, dims []int)
	// take sets dst[i] = src[offs[i]].
	take(dst, src any, offs []int)
	// put sets dst[offs[i]] = src[i].
	put(dst, src any, offs []int)
	// putAt sets dst[o] = src[at] for every o in offs.
	putAt(dst, src any, at int, offs []int)
	// blocks copies block i of size n from src[offs[i]:] to dst[i·n:].
	blocks(dst, src any, offs []int, n int)
	// fill sets every element of dst to src[at].
	fill(dst, src any, at int)
	// nonzero lists the flat positions of src whose value is not the zero value.
	nonzero(src any) []int
	// triZero zeroes the elements outside a triangle of each trailing rows×cols matrix (Trilu).
	triZero(dst any, rows, cols, k int, upper bool)
}

type shapeMoverT[T comparable] struct{}

// shapeOpsFor returns the mover for the tensor data's element type.
func shapeOpsFor(data any) (shapeMover, error) {
	switch data.(type) {
	case []float32:
		return shapeMoverT[float32]{}, nil
	case []float64:
		return shapeMoverT[float64]{}, nil
	case []int64:
		return shapeMoverT[int64]{}, nil
	case []int32:
		return shapeMoverT[int32]{}, nil
	case []int16:
		return shapeMoverT[int16]{}, nil
	case []int8:
		return shapeMoverT[int8]{}, nil
	case []uint8:
		return shapeMoverT[uint8]{}, nil
	case []uint16:
		return shapeMoverT[uint16]{}, nil
	case []uint32:
		return shapeMoverT[uint32]{}, nil
	case []uint64:
		return shapeMoverT[uint64]{}, nil
	case []bool:
		return shapeMoverT[bool]{}, nil
	case []string:
		return shapeMoverT[string]{}, nil
	}
	return nil, fmt.Errorf("unsupported element storage %T", data)
}

func (shapeMoverT[T]) strided(dst any, dOff int, dStr []int, src any, sOff int, sStr []int, dims []int) {
	shapeStridedPar(dst.([]T), dOff, dStr, src.([]T), sOff, sStr, dims)
}

func (shapeMoverT[T]) take(dst, src any, offs []int) {
	d, s := dst.([]T), src.([]T)
	for i, o := range offs {
		d[i] = s[o]
	}
}

func (shapeMoverT[T]) put(dst, src any, offs []int) {
	d, s := dst.([]T), src.([]T)
	for i, o := range offs {
		d[o] = s[i]
	}
}

func (shapeMoverT[T]) putAt(dst, src any, at int, offs []int) {
	d, v := dst.([]T), src.([]T)[at]
	for _, o := range offs {
		d[o] = v
	}
}

func (shapeMoverT[T]) blocks(dst, src any, offs []int, n int) {
	shapeBlocksPar(dst.([]T), src.([]T), offs, n)
}

func (shapeMoverT[T]) fill(dst, src any, at int) {
	d := dst.([]T)
	v := src.([]T)[at]
	for i := range d {
		d[i] = v
	}
}

func (shapeMoverT[T]) nonzero(src any) []int {
	var zero T
	var out []int
	for i, v := range src.([]T) {
		if v != zero {
			out = append(out, i)
		}
	}
	return out
}

// triZero zeroes, in each rows×cols matrix of dst, the elements outside the kept
// triangle: upper keeps j-i >= k, lower keeps j-i <= k.
func (shapeMoverT[T]) triZero(dst any, rows, cols, k int, upper bool) {
	d := dst.([]T)
	var zero T
	mat := rows * cols
	if mat == 0 {
		return
	}
	for base := 0; base < len(d); base += mat {
		for i := 0; i < rows; i++ {
			row := d[base+i*cols : base+(i+1)*cols]
			for j := range row {
				if (upper && j-i < k) || (!upper && j-i > k) {
					row[j] = zero
				}
			}
		}
	}
}

// shapeStridedT copies a strided view of src into a strided view of dst:
// for every index vector x over dims, dst[dOff+Σ x_i·dStr_i] = src[sOff+Σ x_i·sStr_i].
// Strides may be zero (broadcast) or negative (reversed slices).
func shapeStridedT[T any](dst []T, dOff int, dStr []int, src []T, sOff int, sStr []int, dims []int) {
	for _, d := range dims {
		if d == 0 {
			return
		}
	}
	dims, dStr, sStr = shapeCoalesce(dims, dStr, sStr)
	rank := len(dims)
	if rank == 0 {
		dst[dOff] = src[sOff]
		return
	}
	inner, di, si := dims[rank-1], dStr[rank-1], sStr[rank-1]
	idx := make([]int, rank)
	d, s := dOff, sOff
	for {
		switch {
		case di == 1 && si == 1:
			copy(dst[d:d+inner], src[s:s+inner])
		case si == 0:
			v := src[s]
			for j, p := 0, d; j < inner; j, p = j+1, p+di {
				dst[p] = v
			}
		default:
			for j, p, q := 0, d, s; j < inner; j, p, q = j+1, p+di, q+si {
				dst[p] = src[q]
			}
		}
		if !shapeNext(idx, dims, dStr, sStr, rank-2, &d, &s) {
			return
		}
	}
}

// shapeCoalesce drops unit axes and merges neighbouring axes that are contiguous
// in both views, so that inner loops run as long as possible.
func shapeCoalesce(dims, a, b []int) ([]int, []int, []int) {
	nd := make([]int, 0, len(dims))
	na := make([]int, 0, len(dims))
	nb := make([]int, 0, len(dims))
	for i, d := range dims {
		if d == 1 {
			continue
		}
		k := len(nd) - 1
		if k >= 0 && na[k] == a[i]*d && nb[k] == b[i]*d {
			nd[k] *= d
			na[k], nb[k] = a[i], b[i]
			continue
		}
		nd = append(nd, d)
		na = append(na, a[i])
		nb = append(nb, b[i])
	}
	return nd, na, nb
}

// shapeNew allocates an output tensor after checking the element count.
func shapeNew(ar *tensor.Arena, dt tensor.DType, shape []int) (*tensor.Tensor, error) {
	if _, err := tensor.NumElements(shape); err != nil {
		return nil, err
	}
	return ar.New(dt, shape), nil
}

// shapeView copies the view (off, strides over dims) of t into a new contiguous tensor of shape dims.
func shapeView(ar *tensor.Arena, t *tensor.Tensor, off int, strides, dims []int) (*tensor.Tensor, error) {
	out, err := shapeNewUninit(ar, t.DType, dims) // every element is copied
	if err != nil {
		return nil, err
	}
	m, err := shapeOpsFor(t.Data)
	if err != nil {
		return nil, err
	}
	m.strided(out.Data, 0, tensor.Strides(dims), t.Data, off, strides, dims)
	return out, nil
}

// shapeIntsInput reads an optional integer input (shape, axes, pads...) as []int; ok is false when absent.
func shapeIntsInput(c *Call, i int) ([]int, bool, error) {
	t := c.Input(i)
	if t == nil {
		return nil, false, nil
	}
	switch t.DType {
	case tensor.Int64, tensor.Int32:
		return t.Ints(), true, nil
	}
	return nil, false, fmt.Errorf("input %d must be int64 or int32, got %v", i, t.DType)
}

// shapeAxes normalises axes against rank, rejecting duplicates.
func shapeAxes(axes []int, rank int) ([]int, error) {
	out := make([]int, len(axes))
	seen := make([]bool, rank)
	for i, a := range axes {
		n, err := NormAxis(a, rank)
		if err != nil {
			return nil, err
		}
		if seen[n] {
			return nil, fmt.Errorf("axis %d appears twice in %v", a, axes)
		}
		seen[n] = true
		out[i] = n
	}
	return out, nil
}

// shapeNext advances the index vector idx over dims[:top+1] by one, last
// axis fastest, moving the offsets d and s by the strides dStr and sStr; it
// reports false once every index vector has been visited.
func shapeNext(idx, dims, dStr, sStr []int, top int, d, s *int) bool {
	for ax := top; ax >= 0; ax-- {
		idx[ax]++
		*d += dStr[ax]
		*s += sStr[ax]
		if idx[ax] < dims[ax] {
			return true
		}
		*d -= dStr[ax] * dims[ax]
		*s -= sStr[ax] * dims[ax]
		idx[ax] = 0
	}
	return false
}
