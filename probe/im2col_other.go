//go:build !amd64

package probe

var havePackRun = false

func packRun(panel, xp []float32, offs []int, lo, hi, base, n, d, nr int) bool { return false }
