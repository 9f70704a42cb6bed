//go:build !amd64

package stats

// residVec is false: no vector kernel off amd64.
var residVec = false

// residKernel does nothing off amd64 (residGo counts every value).
func residKernel(x []float32, D, d0 int, h0, h1 []int64, over []uint32, mx *uint32) int {
	return 0
}
