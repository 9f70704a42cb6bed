package loader

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// npyDecodeInto converts the raw elements in b (whole elements of type d, in
// d's byte order) into dst, a slice of d.store, starting at element off.
// Booleans are true for any non-zero byte; float16 is widened to float32.
func npyDecodeInto(dst any, off int, b []byte, d npyDType) {
	n := len(b) / d.size
	o := d.order
	switch s := dst.(type) {
	case []float32:
		s = s[off : off+n]
		if d.size == 2 {
			for i := range s {
				s[i] = float16To32(o.Uint16(b[2*i:]))
			}
			return
		}
		for i := range s {
			s[i] = math.Float32frombits(o.Uint32(b[4*i:]))
		}
	case []float64:
		for i := range s[off : off+n] {
			s[off+i] = math.Float64frombits(o.Uint64(b[8*i:]))
		}
	case []int8:
		for i := range s[off : off+n] {
			s[off+i] = int8(b[i])
		}
	case []uint8:
		copy(s[off:off+n], b)
	case []bool:
		for i := range s[off : off+n] {
			s[off+i] = b[i] != 0
		}
	case []int16:
		for i := range s[off : off+n] {
			s[off+i] = int16(o.Uint16(b[2*i:]))
		}
	case []uint16:
		for i := range s[off : off+n] {
			s[off+i] = o.Uint16(b[2*i:])
		}
	case []int32:
		for i := range s[off : off+n] {
			s[off+i] = int32(o.Uint32(b[4*i:]))
		}
	case []uint32:
		for i := range s[off : off+n] {
			s[off+i] = o.Uint32(b[4*i:])
		}
	case []int64:
		for i := range s[off : off+n] {
			s[off+i] = int64(o.Uint64(b[8*i:]))
		}
	case []uint64:
		for i := range s[off : off+n] {
			s[off+i] = o.Uint64(b[8*i:])
		}
	default:
		panic(fmt.Sprintf("loader: npyDecodeInto on %T", dst))
	}
}

// float16To32 widens an IEEE 754 binary16 bit pattern exactly.
func float16To32(h uint16) float32 {
	sign := uint32(h>>15) << 31
	exp := uint32(h>>10) & 0x1f
	mant := uint32(h) & 0x3ff
	switch {
	case exp == 0: // zero or subnormal: mant · 2^-24
		f := float32(mant) * (1.0 / (1 << 24))
		return math.Float32frombits(sign | math.Float32bits(f))
	case exp == 31: // Inf or NaN
		return math.Float32frombits(sign | 0xff<<23 | mant<<13)
	}
	return math.Float32frombits(sign | (exp+112)<<23 | mant<<13)
}

// fortranToC reorders a column-major (Fortran order) array of the given shape
// into row-major (C order): element (i0, …, ik) sits at Σ i_j·F_j in src with
// F_0 = 1, F_j = F_{j-1}·shape_{j-1}, and at Σ i_j·C_j in the result.
func fortranToC(data any, shape []int) any {
	switch s := data.(type) {
	case []float32:
		return transposeF(s, shape)
	case []float64:
		return transposeF(s, shape)
	case []int8:
		return transposeF(s, shape)
	case []uint8:
		return transposeF(s, shape)
	case []bool:
		return transposeF(s, shape)
	case []int16:
		return transposeF(s, shape)
	case []uint16:
		return transposeF(s, shape)
	case []int32:
		return transposeF(s, shape)
	case []uint32:
		return transposeF(s, shape)
	case []int64:
		return transposeF(s, shape)
	case []uint64:
		return transposeF(s, shape)
	}
	panic(fmt.Sprintf("loader: fortranToC on %T", data))
}

func transposeF[T any](src []T, shape []int) []T {
	dst := make([]T, len(src))
	if len(src) == 0 {
		return dst
	}
	k := len(shape)
	fstride := make([]int, k)
	acc := 1
	for j := range k {
		fstride[j] = acc
		acc *= shape[j]
	}
	idx := make([]int, k)
	f := 0 // source offset of idx
	for c := range dst {
		dst[c] = src[f]
		// advance idx in C order (last axis fastest), tracking f
		for j := k - 1; j >= 0; j-- {
			idx[j]++
			f += fstride[j]
			if idx[j] < shape[j] {
				break
			}
			f -= fstride[j] * idx[j]
			idx[j] = 0
		}
	}
	return dst
}

// npyDescrOf is the .npy type string written for a tensor type (little-endian).
func npyDescrOf(dt tensor.DType) (string, bool) {
	s, ok := map[tensor.DType]string{
		tensor.Float32: "<f4", tensor.Float64: "<f8",
		tensor.Int8: "|i1", tensor.Int16: "<i2", tensor.Int32: "<i4", tensor.Int64: "<i8",
		tensor.Uint8: "|u1", tensor.Uint16: "<u2", tensor.Uint32: "<u4", tensor.Uint64: "<u8",
		tensor.Bool: "|b1",
	}[dt]
	return s, ok
}
