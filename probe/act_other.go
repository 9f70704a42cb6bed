//go:build !amd64

package probe

var actVecLevel = 0

func actVec(dst, src []float32, op actOp, p *[3]float64) int { return 0 }

func siluVec(dst, mul, src []float32, sigFirst bool) bool { return false }
