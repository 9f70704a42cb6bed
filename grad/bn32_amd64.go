package grad

import "golang.org/x/sys/cpu"

// AVX-512 loops of bnPlane32 (bn32_amd64.s): n a multiple of 16.

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
