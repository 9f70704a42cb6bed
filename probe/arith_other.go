//go:build !amd64

package probe

var haveArithVec = false

func vvVec(op opID, dst, x, y []float32) int { return 0 }

func vsVec(op opID, dst, x []float32, s float32, swap bool) int { return 0 }
