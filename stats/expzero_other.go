//go:build !amd64

package stats

// expZeroPrefix has no vector version off amd64.
func expZeroPrefix(x []float32) (count, done int) { return 0, 0 }
