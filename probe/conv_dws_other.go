//go:build !amd64

package probe

var haveDwSmall = false

func dwSmallPlane(y, x, w []float32, bias float32, a *dwSmallArgs) {
	panic("dwSmallPlane without AVX-512")
}
