package probe

import "golang.org/x/sys/cpu"

// transpose16AVX512 (transpose_amd64.s): dst[i·dstRow + j] =
// src[j·srcRow + i] for i, j < 16, strides in values.
//
//go:noescape
func transpose16AVX512(dst *float32, dstRow int, src *float32, srcRow int)

// haveTranspose16 is true where transpose16AVX512 runs (tests clear it).
var haveTranspose16 = cpu.X86.HasAVX512F

// transpose16 moves one full 16×16 tile (see transpose16AVX512) and
// reports whether it did; the slices must reach the tile's last value.
func transpose16(dst []float32, dRow int, src []float32, sCol int) bool {
	if !haveTranspose16 {
		return false
	}
	_, _ = dst[15*dRow+15], src[15*sCol+15]
	transpose16AVX512(&dst[0], dRow, &src[0], sCol)
	return true
}
