//go:build !amd64

package probe

// dwVecLevel is 0 off amd64 (Go rows only); the tests that step through the
// levels of the amd64 build read and restore it.
var dwVecLevel = 0

// dw3RowVec has no vector version off amd64: dw3RowGo does all the work.
func dw3RowVec(dst, r0, r1, r2 []float32, wb *[10]float32, sw int) int { return 0 }
