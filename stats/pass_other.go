//go:build !amd64

package stats

// passVec has no vector version off amd64.
func passVec(x []float32, p *passParams, tabs []uint32, l *passLanes) bool { return false }
