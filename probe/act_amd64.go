package probe

import (
	"math"

	"golang.org/x/sys/cpu"
)

// actAVX512 applies activation op (actSigmoid…) to n values of src (n a
// multiple of 8) into dst, eight at a time in float64 lanes (act_amd64.s):
// the same float64 formula as the Go reference (act_f32.go), with e^t
// computed as 2^k·e^r, t = k·ln2 + r, |r| ≤ ln2/2, k rounded to nearest, e^r
// by its Taylor series to r¹³ (the first omitted term, r¹⁴/14! ≤ 4e-18,
// is far below float64's 1.1e-16 relative rounding), and e^t − 1 as
// 2^k·(e^r − 1) + (2^k − 1) with e^r − 1 = r·(1 + r/2 + …), free of the
// cancellation near 0. The relative error of the float64 result is a few
// 1e-16, so rounded to float32 it equals the reference's rounding except
// within that distance of a float32 rounding boundary, where the two are
// adjacent float32 values (1 ulp; TestActivationsMatchMath sweeps the
// float32 range).
//
//go:noescape
func actAVX512(dst, src *float32, n int, op int, table *[24]float64, p *[3]float64)

// actTable: 1/n! for n = 0…13, log2 e, ln2 as a float64 and its remainder,
// the exponent clamps (beyond them e^t is 0 or +Inf in float64), then 20, 2,
// 6 and 1/2.
var actTable = func() (t [24]float64) {
	f := 1.0
	for n := 0; n < 14; n++ {
		if n > 0 {
			f *= float64(n)
		}
		t[n] = 1 / f
	}
	t[14] = math.Log2E
	t[15] = math.Ln2
	t[16] = 2.319046813846299558e-17 // ln2 − float64(ln2)
	t[17], t[18] = 710, -746
	t[19], t[20], t[21], t[22] = 20, 2, 6, 0.5
	return t
}()

// actAVX2 is actAVX512 four values at a time with AVX2 and FMA (n a
// multiple of 4), its constants broadcast in actTable4.
//
//go:noescape
func actAVX2(dst, src *float32, n int, op int, table *[26][4]float64, p *[3][4]float64)

// actTable4 is actTable with every entry broadcast to four lanes, then the
// sign bit and the exponent bias 1023 (as integer bits).
var actTable4 = func() (t [26][4]float64) {
	for i, v := range actTable {
		t[i] = [4]float64{v, v, v, v}
	}
	s, b := math.Float64frombits(1<<63), math.Float64frombits(1023)
	t[23] = [4]float64{s, s, s, s}
	t[24] = [4]float64{b, b, b, b}
	return t
}()

// actVecLevel picks the kernel: 2 AVX-512, 1 AVX2 + FMA, 0 none (the Go
// reference). Tests lower it to check each level.
var actVecLevel = func() int {
	switch {
	case cpu.X86.HasAVX512F && cpu.X86.HasAVX512DQ:
		return 2
	case cpu.X86.HasAVX2 && cpu.X86.HasFMA:
		return 1
	}
	return 0
}()

// actVec applies op to the leading multiple of 8 (AVX-512) or 4 (AVX2)
// values and returns how many it did (0 without either).
func actVec(dst, src []float32, op actOp, p *[3]float64) int {
	switch actVecLevel {
	case 2:
		if op == actSigmoid {
			// float32 lanes, every value (act32_amd64.go)
			n := min(len(dst), len(src))
			if n > 0 {
				sigmoid32AVX512(&dst[0], &src[0], n, &sigmoid32Table, nil, 0)
			}
			return n
		}
		n := min(len(dst), len(src)) &^ 7
		if n > 0 {
			actAVX512(&dst[0], &src[0], n, int(op), &actTable, p)
		}
		return n
	case 1:
		n := min(len(dst), len(src)) &^ 3
		if n > 0 {
			var p4 [3][4]float64
			for i, v := range p {
				p4[i] = [4]float64{v, v, v, v}
			}
			actAVX2(&dst[0], &src[0], n, int(op), &actTable4, &p4)
		}
		return n
	}
	return 0
}

// siluVec sets dst = sigmoid(src) and mul = src·dst (Mul(src, dst), or
// Mul(dst, src) if sigFirst) in one pass of float32 lanes, and reports
// whether it did (AVX-512 only: the values of sigmoidF32 then vvF32). With
// dst nil only mul is written.
func siluVec(dst, mul, src []float32, sigFirst bool) bool {
	if actVecLevel != 2 {
		return false
	}
	n := len(src)
	if n == 0 {
		return true
	}
	_ = mul[n-1]
	order := 0
	if sigFirst {
		order = 1
	}
	if dst == nil {
		var scratch [16]float32
		sigmoid32AVX512(&scratch[0], &src[0], n, &sigmoid32Table, &mul[0], order|2)
		return true
	}
	_ = dst[n-1]
	sigmoid32AVX512(&dst[0], &src[0], n, &sigmoid32Table, &mul[0], order)
	return true
}
