package grad

import "golang.org/x/sys/cpu"

// AVX-512 loops of bnPlane32 (bn32_amd64.s) and of HardSwish's float32 rule
// (act32_amd64.s): n a multiple of 16.

//go:noescape
func bnPlaneAVX512(gp, x, d *float32, n int, k float32, lanes *[10][8]float64)

//go:noescape
func bnPlaneMaskAVX512(gp, m, x, d *float32, n int, k float32, lanes *[10][8]float64)

// haveBN512 is true where the loops run (tests clear it to compare with
// the Go loops).
var haveBN512 = cpu.X86.HasAVX512F

// bnPlaneVec runs the vector loop over the first len(g)&^15 elements and
// returns how many it did (0: none, no vector loop here).
func bnPlaneVec(g, m, x, d []float32, k float32, lanes *[10][8]float64) int {
	n := len(g) &^ 15
	if !haveBN512 || n == 0 || d == nil {
		return 0
	}
	if m != nil {
		bnPlaneMaskAVX512(&g[0], &m[0], &x[0], &d[0], n, k, lanes)
	} else {
		bnPlaneAVX512(&g[0], &x[0], &d[0], n, k, lanes)
	}
	return n
}

//go:noescape
func hardSwishAVX512(dst, gp, x *float32, n int, lanes *[2][8]float64)

// hardSwishVec runs hardSwishAVX512 over the first len(g)&^15 elements,
// returning how many it did and Σ G² over them.
func hardSwishVec(dst, g, x []float32) (int, float64) {
	n := len(g) &^ 15
	if !haveBN512 || n == 0 {
		return 0, 0
	}
	var lanes [2][8]float64
	hardSwishAVX512(&dst[0], &g[0], &x[0], n, &lanes)
	return n, laneSum(&lanes[0], &lanes[1])
}

//go:noescape
func dwRunsAVX512(gp, x, dx *float32, runs *run, nruns int, wt float32, lanes *[16]float32)

// dwRunsVec runs dwRunsAVX512 over the unit-step runs of one tap and
// reports whether it did (false: no vector loop here; nothing done).
func dwRunsVec(g, x, dx []float32, runs []run, wt float32, lanes *[16]float32) bool {
	if !haveBN512 || len(runs) == 0 {
		return false
	}
	var d *float32
	if dx != nil {
		d = &dx[0]
	}
	dwRunsAVX512(&g[0], &x[0], d, &runs[0], len(runs), wt, lanes)
	return true
}

//go:noescape
func maxPool2x2AVX512(x0, x1, y, gp, d0, d1 *float32, n int) bool

// maxPool2x2RowVec runs maxPool2x2AVX512 over one row of n windows
// (false: no vector loop here, or a window without its maximum: the
// caller does the row).
func maxPool2x2RowVec(xp, yp, gp, dx []float32, r0, r1, q, n int) bool {
	if !haveBN512 || n == 0 {
		return false
	}
	return maxPool2x2AVX512(&xp[r0], &xp[r1], &yp[q], &gp[q], &dx[r0], &dx[r1], n)
}

//go:noescape
func padBlocks8AVX(dst *float32, at *int, C int, src *float32, I int, nc int)

// havePadAVX is true where padBlocks8AVX runs (tests clear it).
var havePadAVX = cpu.X86.HasAVX

// padBlocks8 moves the 8×8 blocks of one run of 8 positions i0 (channels
// below c8, a multiple of 8) by padBlocks8AVX; false: no vector loop here.
func padBlocks8(dst, x []float32, C, I, c8, i0 int, at []int) bool {
	if !havePadAVX || c8 == 0 {
		return false
	}
	padBlocks8AVX(&dst[0], &at[0], C, &x[i0], I, c8)
	return true
}

//go:noescape
func sumAVX512(x *float32, n int, lanes *[2][8]float64)

// sumVec runs sumAVX512 over the first len(g)&^15 elements, returning how
// many it did and their sum.
func sumVec(g []float32) (int, float64) {
	n := len(g) &^ 15
	if !haveBN512 || n == 0 {
		return 0, 0
	}
	var lanes [2][8]float64
	sumAVX512(&g[0], n, &lanes)
	return n, laneSum(&lanes[0], &lanes[1])
}
