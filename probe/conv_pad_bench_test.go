package probe

import (
	"math"
	"math/rand"
	"testing"
)

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

// padPairs (both column phases of stride 2 from one pass over each row,
// through phasePairs) writes the same padded phase planes as the
// phase-by-phase loop, every value including the zeros, over random plane
// sizes, paddings 0–3, kernel sizes 1–5 and row strides 1–2; the
// destinations start filled with garbage so a missed clear shows.
func TestPadPairsMatchPhaseByPhase(t *testing.T) {
	r := rand.New(rand.NewSource(91))
	defer func() { padPairsOn = true }()
	for trial := 0; trial < 300; trial++ {
		H, W := 1+r.Intn(12), 1+r.Intn(12)
		K := 1 + r.Intn(5)
		sh := 1 + r.Intn(2)
		pt, pl, pb, pr := r.Intn(4), r.Intn(4), r.Intn(4), r.Intn(4)
		OH, OW := (H+pt+pb-K)/sh+1, (W+pl+pr-K)/2+1
		if OH < 1 || OW < 1 {
			continue
		}
		g := convGeom{in: []int{H, W}, k: []int{K, K}, out: []int{OH, OW}, strides: []int{sh, 2}, dil: []int{1, 1}, padBeg: []int{pt, pl}, padEnd: []int{pb, pr}}
		const C = 3
		q := newIm2colPanels(&g, C, 8)
		x := make([]float32, C*H*W)
		for i := range x {
			x[i] = float32(r.NormFloat64())
		}
		var got [2][]float32
		for k, pairs := range []bool{true, false} {
			padPairsOn = pairs
			d := make([]float32, q.imgStride)
			for i := range d {
				d[i] = 999
			}
			q.padRange(d, x, 0, C, &g)
			got[k] = d
		}
		for i := range got[0] {
			if math.Float32bits(got[0][i]) != math.Float32bits(got[1][i]) {
				t.Fatalf("trial %d (H %d W %d K %d sh %d pads %d,%d,%d,%d): value %d = %g with pairs, %g phase by phase", trial, H, W, K, sh, pt, pl, pb, pr, i, got[0][i], got[1][i])
			}
		}
	}
}
