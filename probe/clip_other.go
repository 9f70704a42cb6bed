//go:build !amd64

package probe

// clipVec has no vector version off amd64.
func clipVec(dst, src []float32, lo, hi float32) bool { return false }
