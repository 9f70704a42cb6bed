//go:build !amd64

package stats

const passNone = 0

// passLevel is the vector kernel level: none off amd64.
var passLevel = passNone

// passVec has no vector version off amd64.
func passVec(x []float32, p *passParams, tabs []uint32, l *passLanes) bool { return false }
