package probe

import (
	"github.com/vitals-health/vitals/tensor"
)

// Data movement of the shape operators (Transpose, Slice, Split, Expand,
// Tile, Concat, Gather) split across the cores and, for a copy that reads
// across its destination's rows (a transpose of the last axis), done in
// square tiles so that both sides stay in cache.

// shapeParMin is the element count from which a copy is split across the
// cores (common practice: below about 100 KiB the hand-off to the workers
// costs as much as the copy).
const shapeParMin = 1 << 15

// shapeTile is the edge of a transpose tile in elements: 16 float32 values
// are one 64-byte cache line, so a 16×16 tile reads 16 lines of the source
// and writes 16 lines of the destination (common practice).
const shapeTile = 16

// shapeNewUninit is shapeNew for an output whose every element the kernel
// writes: a recycled float32 buffer is not cleared first.
func shapeNewUninit(ar *tensor.Arena, dt tensor.DType, shape []int) (*tensor.Tensor, error) {
	if _, err := tensor.NumElements(shape); err != nil {
		return nil, err
	}
	return ar.NewUninit(dt, shape), nil
}

// shapeStridedPar is shapeStridedT (the same element moves) with the outer
// axis split across the cores for large copies and a tiled inner loop for
// transposes. The destination views of the parts are disjoint, so the
// result does not depend on the split.
func shapeStridedPar[T any](dst []T, dOff int, dStr []int, src []T, sOff int, sStr []int, dims []int) {
	total := 1
	for _, d := range dims {
		if d == 0 {
			return
		}
		total *= d
	}
	dims, dStr, sStr = shapeCoalesce(dims, dStr, sStr)
	if len(dims) == 0 {
		dst[dOff] = src[sOff]
		return
	}
	if total < shapeParMin || len(dims) == 1 {
		shapeStridedTiled(dst, dOff, dStr, src, sOff, sStr, dims)
		return
	}
	parFor(dims[0], 1, func(lo, hi int) {
		part := append([]int{hi - lo}, dims[1:]...)
		shapeStridedTiled(dst, dOff+lo*dStr[0], dStr, src, sOff+lo*sStr[0], sStr, part)
	})
}

// shapeStridedTiled copies like shapeStridedT. When the destination's last
// axis is contiguous but the source's is not, and another axis p is
// contiguous in the source, the (p, last) plane is copied in
// shapeTile×shapeTile tiles; otherwise it is shapeStridedT.
func shapeStridedTiled[T any](dst []T, dOff int, dStr []int, src []T, sOff int, sStr []int, dims []int) {
	r := len(dims)
	p := -1
	if r >= 2 && dStr[r-1] == 1 && sStr[r-1] != 1 && dims[r-1] >= shapeTile {
		for a := 0; a < r-1; a++ {
			if sStr[a] == 1 && dims[a] >= shapeTile {
				p = a
			}
		}
	}
	if p < 0 {
		shapeStridedT(dst, dOff, dStr, src, sOff, sStr, dims)
		return
	}
	// outer axes: all but p and the last
	oDims := make([]int, 0, r-2)
	oD := make([]int, 0, r-2)
	oS := make([]int, 0, r-2)
	for a := 0; a < r-1; a++ {
		if a != p {
			oDims, oD, oS = append(oDims, dims[a]), append(oD, dStr[a]), append(oS, sStr[a])
		}
	}
	rows, cols := dims[p], dims[r-1]
	dRow, sCol := dStr[p], sStr[r-1]
	if d32, ok := any(dst).([]float32); ok && haveTranspose16 && rows >= 16 && cols >= 16 {
		s32 := any(src).([]float32)
		shapeEach(oDims, oD, oS, dOff, sOff, func(d, s int) {
			shapeTranspose32(d32[d:], dRow, s32[s:], sCol, rows, cols)
		})
		return
	}
	shapeEach(oDims, oD, oS, dOff, sOff, func(d, s int) {
		shapeTranspose(dst[d:], dRow, src[s:], sCol, rows, cols)
	})
}

// shapeTranspose sets dst[i·dRow + j] = src[i + j·sCol] for i < rows,
// j < cols, tile by tile; inside a tile the source is read along its
// contiguous runs and the destination written across rows (on the
// development machine the other order, reading across 2048-float strides,
// was 4.6× slower on the attention keys' [128, 32, 64] → [32, 64, 128]:
// 808 against 176 µs, one core).
func shapeTranspose[T any](dst []T, dRow int, src []T, sCol int, rows, cols int) {
	for i0 := 0; i0 < rows; i0 += shapeTile {
		i1 := min(i0+shapeTile, rows)
		for j0 := 0; j0 < cols; j0 += shapeTile {
			j1 := min(j0+shapeTile, cols)
			for j := j0; j < j1; j++ {
				p := i0*dRow + j
				for _, v := range src[i0+j*sCol : i1+j*sCol] {
					dst[p] = v
					p += dRow
				}
			}
		}
	}
}

// shapeTranspose32 is shapeTranspose for float32 with the full 16×16
// tiles moved in vector registers (transpose16) and the edges as before.
func shapeTranspose32(dst []float32, dRow int, src []float32, sCol int, rows, cols int) {
	r16, c16 := rows&^15, cols&^15
	for i0 := 0; i0 < r16; i0 += 16 {
		for j0 := 0; j0 < c16; j0 += 16 {
			if !transpose16(dst[i0*dRow+j0:], dRow, src[i0+j0*sCol:], sCol) {
				shapeTranspose(dst[i0*dRow+j0:], dRow, src[i0+j0*sCol:], sCol, 16, 16)
			}
		}
	}
	if c16 < cols { // the right edge: columns c16… of every row
		shapeTranspose(dst[c16:], dRow, src[c16*sCol:], sCol, rows, cols-c16)
	}
	if r16 < rows { // the bottom edge: rows r16… of the first c16 columns
		shapeTranspose(dst[r16*dRow:], dRow, src[r16:], sCol, rows-r16, c16)
	}
}

// shapeEach calls f with the destination and source offsets of every index
// vector over dims (strides dStr, sStr from dOff, sOff); once with the
// offsets themselves when dims is empty.
func shapeEach(dims, dStr, sStr []int, dOff, sOff int, f func(d, s int)) {
	idx := make([]int, len(dims))
	d, s := dOff, sOff
	for {
		f(d, s)
		if !shapeNext(idx, dims, dStr, sStr, len(dims)-1, &d, &s) {
			return
		}
	}
}

// shapeBlocksPar copies block i of n elements from src[offs[i]:] to
// dst[i·n:], the blocks split across the cores when there are many
// elements.
func shapeBlocksPar[T any](dst, src []T, offs []int, n int) {
	minChunk := max(1, shapeParMin/max(n, 1))
	parFor(len(offs), minChunk, func(lo, hi int) {
		if n == 1 {
			for i := lo; i < hi; i++ {
				dst[i] = src[offs[i]]
			}
			return
		}
		for i := lo; i < hi; i++ {
			copy(dst[i*n:(i+1)*n], src[offs[i]:offs[i]+n])
		}
	})
}
