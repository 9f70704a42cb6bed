//go:build !amd64

package grad

// haveBN512: no vector loop off amd64.
var haveBN512 = false

func bnPlaneVec(g, m, x, d []float32, k float32, lanes *[10][8]float64) int { return 0 }

func hardSwishVec(dst, g, x []float32) (int, float64) { return 0, 0 }

func dwRunsVec(g, x, dx []float32, runs []run, wt float32, lanes *[16]float32) bool { return false }

func maxPool2x2RowVec(xp, yp, gp, dx []float32, r0, r1, q, n int) bool { return false }

var havePadAVX = false

func padBlocks8(dst, x []float32, C, I, c8, i0 int, at []int) bool { return false }

func sumVec(g []float32) (int, float64) { return 0, 0 }
