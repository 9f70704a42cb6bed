package probe

import (
	"unsafe"

	"golang.org/x/sys/cpu"
)

//go:generate go run gen_dwtaps.go

// dwTapsAVX512 is dwTapsGo for n outputs (conv_dwk_amd64.s): each src must
// hold n values.
//
//go:noescape
func dwTapsAVX512(dst *float32, n int, srcs *unsafe.Pointer, w *float32, taps int, bias float32)

// haveDwTapsVec is true where dwTapsAVX512 runs (tests clear it).
var haveDwTapsVec = cpu.X86.HasAVX512F

// dwTapsVec runs dwTapsAVX512 over all of dst and reports whether it did.
func dwTapsVec(dst []float32, srcs [][]float32, w []float32, bias float32, ptrs []unsafe.Pointer) bool {
	if !haveDwTapsVec || len(dst) == 0 || len(srcs) == 0 {
		return false
	}
	n := len(dst)
	for i, s := range srcs {
		_ = s[n-1] // every source holds n values
		ptrs[i] = unsafe.Pointer(&s[0])
	}
	_ = w[len(srcs)-1]
	dwTapsAVX512(&dst[0], n, &ptrs[0], &w[0], len(srcs), bias)
	return true
}

// dwTapsPtrs sets ptrs[i] to the start of srcs[i] (each holding len(dst)
// values) for dwTapsRun and reports whether dwTapsRun can run.
func dwTapsPtrs(dst []float32, srcs [][]float32, ptrs []unsafe.Pointer) bool {
	if !haveDwTapsVec || len(dst) == 0 || len(srcs) == 0 {
		return false
	}
	n := len(dst)
	for i, s := range srcs {
		_ = s[n-1] // every source holds n values
		ptrs[i] = unsafe.Pointer(&s[0])
	}
	return true
}

// dwTapsRun is dwTapsVec with the run pointers set by dwTapsPtrs (for the
// same len(dst)); w holds len(ptrs) weights.
func dwTapsRun(dst []float32, ptrs []unsafe.Pointer, w []float32, bias float32) bool {
	if !haveDwTapsVec || len(dst) == 0 || len(ptrs) == 0 || len(w) < len(ptrs) {
		return false
	}
	dwTapsAVX512(&dst[0], len(dst), &ptrs[0], &w[0], len(ptrs), bias)
	return true
}
