package stats

// expZeroAVX512 counts the values of x (len a multiple of 64) whose
// exponent bits are NOT all zero (expzero_amd64.s).
//
//go:noescape
func expZeroAVX512(x []float32) int

// expZeroPrefix counts the values with all-zero exponent bits in x[:done]
// with the vector kernel (done = 0 where the CPU has none).
func expZeroPrefix(x []float32) (count, done int) {
	if passLevel != passLevelAVX512 || len(x) < 64 {
		return 0, 0
	}
	m := len(x) &^ 63
	return m - expZeroAVX512(x[:m]), m
}
