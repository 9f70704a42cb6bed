//go:build !amd64

package stats

// residVec is false: no vector kernel off amd64.
var residVec = false

// residKernel does nothing off amd64 (residGo counts every value).
func residKernel(x []float32, D, d0 int, h0, h1 []int64, over []uint32, mx *uint32) int {
	return 0
}

// addRows4 is addRows4Go off amd64.
func addRows4(u []float64, r0, r1, r2, r3 []float32, inv *[4]float64) {
	addRows4Go(u, r0, r1, r2, r3, inv)
}

// sumSquares16 does nothing off amd64 (sumSquares sums every row).
func sumSquares16(q []float64, x []float32, D int) int { return 0 }
