//go:build !amd64

package probe

var haveSoftmaxVec = false

func softmaxExpVec(y, x []float32, mx float32) (int, float64) { return 0, 0 }

func softmaxMaxVec(x []float32, m float32) (int, float32) { return 0, m }

func softmaxScaleVec(y []float32, r float64) int { return 0 }
