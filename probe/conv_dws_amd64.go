package probe

import "golang.org/x/sys/cpu"

// dwSmallAVX512 writes one depthwise output plane of OH rows of OW ≤ 16
// values into y from the H × W plane x (conv_dws_amd64.s; see
// conv_dws_f32.go).
//
//go:noescape
func dwSmallAVX512(y, x *float32, a *dwSmallArgs)

// haveDwSmall is true where dwSmallAVX512 runs (tests may clear it).
var haveDwSmall = cpu.X86.HasAVX512F

// dwSmallPlane writes one plane: y holds OH·OW values, x H·W, w KH·KW.
func dwSmallPlane(y, x, w []float32, bias float32, a *dwSmallArgs) {
	_ = y[a.oh*a.ow-1]
	_ = x[a.h*a.wd-1]
	_ = w[a.kh*a.kw-1]
	a.w, a.bias = &w[0], bias
	dwSmallAVX512(&y[0], &x[0], a)
}
