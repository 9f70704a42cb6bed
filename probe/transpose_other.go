//go:build !amd64

package probe

var haveTranspose16 = false

func transpose16(dst []float32, dRow int, src []float32, sCol int) bool { return false }
