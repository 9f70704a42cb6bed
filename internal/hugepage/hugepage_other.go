//go:build !linux

package hugepage

// Advise does nothing outside Linux.
func Advise([]float32) {}
