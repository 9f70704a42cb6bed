package stats

import "golang.org/x/sys/cpu"

// residAVX512 is residGo's loop over whole groups of 16 (resid_amd64.s):
// x starts at feature d0 of rows of D values (D a multiple of 16); it stops
// before the first group holding a NaN or ±Inf and returns the values done.
//
//go:noescape
func residAVX512(x []float32, D, d0 int, h0, h1 *int64, over *uint32, mx *uint32) int

var residVec = cpu.X86.HasAVX512F

// residKernel runs residAVX512 where the CPU has AVX-512 (0 values done
// otherwise).
func residKernel(x []float32, D, d0 int, h0, h1 []int64, over []uint32, mx *uint32) int {
	if !residVec || len(x) < 16 {
		return 0
	}
	_, _, _ = h0[absBins-1], h1[absBins-1], over[D-1]
	return residAVX512(x[:len(x)&^15], D, d0, &h0[0], &h1[0], &over[0], mx)
}
