//go:build !amd64

package probe

var havePoolVec = false

func maxRowsVec(dst, a, b []float32) int { return 0 }

func sum8Vec(x []float32, acc *[8]float64) int { return 0 }

func maxCols3s2Whole(dst, src []float32) {}

func maxCols2s2Whole(dst, src []float32) {}
