//go:build !amd64

package probe

var haveSoftmaxVec = false

func softmaxExpVec(y, x []float32, mx float32) (int, float64) { return 0, 0 }
