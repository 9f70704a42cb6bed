//go:build !amd64

package stats

// rowEnt is rowEntGo off amd64.
func rowEnt(p []float32) (float64, int, float32) { return rowEntGo(p) }

// rowEntVec is false: no vector kernel off amd64.
var rowEntVec = false
