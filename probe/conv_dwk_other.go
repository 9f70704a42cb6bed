//go:build !amd64

package probe

import "unsafe"

var haveDwTapsVec = false

func dwTapsVec(dst []float32, srcs [][]float32, w []float32, bias float32, ptrs []unsafe.Pointer) bool {
	return false
}

func dwTapsPtrs(dst []float32, srcs [][]float32, ptrs []unsafe.Pointer) bool { return false }

func dwTapsRun(dst []float32, ptrs []unsafe.Pointer, w []float32, bias float32) bool { return false }
