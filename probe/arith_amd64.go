package probe

import "golang.org/x/sys/cpu"

// AVX-512 loops for vvF32 and vsF32 (arith_amd64.s): n a multiple of 16.

//go:noescape
func vvAddAVX512(dst, x, y *float32, n int)

//go:noescape
func vvSubAVX512(dst, x, y *float32, n int)

//go:noescape
func vvMulAVX512(dst, x, y *float32, n int)

//go:noescape
func vvDivAVX512(dst, x, y *float32, n int)

//go:noescape
func vsAddAVX512(dst, x *float32, s float32, n int)

//go:noescape
func vsSubAVX512(dst, x *float32, s float32, n int)

//go:noescape
func vsSubSwapAVX512(dst, x *float32, s float32, n int)

//go:noescape
func vsMulAVX512(dst, x *float32, s float32, n int)

//go:noescape
func vsDivAVX512(dst, x *float32, s float32, n int)

//go:noescape
func vsDivSwapAVX512(dst, x *float32, s float32, n int)

// haveArithVec is true where the loops run (tests clear it to compare with
// the Go loops).
var haveArithVec = cpu.X86.HasAVX512F

// vvVec does the leading multiple of 16 of vvF32 and returns how many
// values it did (0 without AVX-512).
func vvVec(op opID, dst, x, y []float32) int {
	n := len(x) &^ 15
	if !haveArithVec || n == 0 {
		return 0
	}
	_, _ = dst[n-1], y[n-1]
	f := [...]func(dst, x, y *float32, n int){addT: vvAddAVX512, subT: vvSubAVX512, mulT: vvMulAVX512, divT: vvDivAVX512}
	if int(op) >= len(f) {
		return 0
	}
	f[op](&dst[0], &x[0], &y[0], n)
	return n
}

// vsVec does the leading multiple of 16 of vsF32 and returns how many
// values it did (0 without AVX-512).
func vsVec(op opID, dst, x []float32, s float32, swap bool) int {
	n := len(x) &^ 15
	if !haveArithVec || n == 0 {
		return 0
	}
	_ = dst[n-1]
	var f func(dst, x *float32, s float32, n int)
	switch {
	case op == addT:
		f = vsAddAVX512
	case op == mulT:
		f = vsMulAVX512
	case op == subT && !swap:
		f = vsSubAVX512
	case op == subT:
		f = vsSubSwapAVX512
	case op == divT && !swap:
		f = vsDivAVX512
	case op == divT:
		f = vsDivSwapAVX512
	default:
		return 0
	}
	f(&dst[0], &x[0], s, n)
	return n
}
