package probe

import "golang.org/x/sys/cpu"

//go:noescape
func normPartialsAVX512(x *float32, n int, mu float64, sq int, p *[16]float64)

//go:noescape
func normAffineAVX512(y, x *float32, n int, mu, rs float64, scale, bias *float64)

// haveNormVec is true where the float64-lane row kernels run (tests clear
// it to compare with the Go loops).
var haveNormVec = cpu.X86.HasAVX512F

// normPartialsVec runs normPartialsAVX512 over the first multiple of 16 of
// x and returns how many values it took (0 without AVX-512).
func normPartialsVec(x []float32, mu float64, sq bool, p *[16]float64) int {
	n := len(x) &^ 15
	if !haveNormVec || n == 0 {
		return 0
	}
	s := 0
	if sq {
		s = 1
	}
	normPartialsAVX512(&x[0], n, mu, s, p)
	return n
}

// normAffineVec runs normAffineAVX512 over the first multiple of 8 of x
// and returns how many values it wrote (0 without AVX-512).
func normAffineVec(y, x []float32, mu, rs float64, scale, bias []float64) int {
	n := len(x) &^ 7
	if !haveNormVec || n == 0 {
		return 0
	}
	_, _ = y[n-1], scale[n-1]
	var b *float64
	if bias != nil {
		_ = bias[n-1]
		b = &bias[0]
	}
	normAffineAVX512(&y[0], &x[0], n, mu, rs, &scale[0], b)
	return n
}
