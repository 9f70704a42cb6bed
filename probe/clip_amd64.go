package probe

import "golang.org/x/sys/cpu"

// clipAVX clips the first len(src)&^7 values of src into dst with AVX
// (clip_amd64.s); dst must be at least as long as src.
//
//go:noescape
func clipAVX(dst, src []float32, lo, hi float32)

var haveClipAVX = cpu.X86.HasAVX

// clipVec clips src into dst: the AVX loop for whole vectors, then the rest
// in Go. It reports false when AVX is missing (the caller loops itself).
func clipVec(dst, src []float32, lo, hi float32) bool {
	if !haveClipAVX {
		return false
	}
	n := len(src) &^ 7
	if n > 0 {
		clipAVX(dst[:n], src[:n], lo, hi)
	}
	clipScalar(dst[n:len(src)], src[n:], lo, hi)
	return true
}
