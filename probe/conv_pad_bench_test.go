package probe

import "testing"

// BenchmarkPadPhases times the zero-padded, phase-split copy of one image
// (64 channels of 112×112, 3×3 window, stride 2, pad 1: RegNetY's first
// grouped convolution) that convGrouped and the implicit GEMM read.
func BenchmarkPadPhases(b *testing.B) {
	g := convGeom{in: []int{112, 112}, k: []int{3, 3}, out: []int{56, 56}, strides: []int{2, 2}, dil: []int{1, 1}, padBeg: []int{1, 1}, padEnd: []int{1, 1}}
	const C = 64
	q := newIm2colPanels(&g, C, 8)
	x := make([]float32, C*112*112)
	for i := range x {
		x[i] = float32(i%97) / 97
	}
	dst := make([]float32, q.imgStride)
	for _, pairs := range []bool{true, false} {
		name := "pairs"
		if !pairs {
			name = "phase-by-phase"
		}
		b.Run(name, func(b *testing.B) {
			defer func() { padPairsOn = true }()
			padPairsOn = pairs
			b.SetBytes(int64(4 * len(x)))
			for b.Loop() {
				q.padRange(dst, x, 0, C, &g)
			}
		})
	}
}
