package gemm_test

import (
	"fmt"

	"github.com/vitals-health/vitals/gemm"
)

// A 1×1-channel 2×2 "convolution" over a 3×3 image as im2col + GEMM:
// out[co][pixel] = Σ_r W[co][r]·cols[r][pixel], weights packed once.
func ExampleSgemmPackedA() {
	img := []float32{
		1, 2, 3,
		4, 5, 6,
		7, 8, 9,
	}
	const kh, kw, oh, ow = 2, 2, 2, 2
	w := []float32{1, 0, 0, -1} // out channel 0: x[i][j] - x[i+1][j+1]
	pw := gemm.PackA(false, 1, kh*kw, w, kh*kw)

	cols := make([]float32, kh*kw*oh*ow) // [kh·kw][oh·ow]
	for r := 0; r < kh*kw; r++ {
		for p := 0; p < oh*ow; p++ {
			cols[r*oh*ow+p] = img[(p/ow+r/kw)*3+p%ow+r%kw]
		}
	}
	out := make([]float32, oh*ow)
	gemm.SgemmPackedA(oh*ow, 1, pw, false, cols, oh*ow, 0, out, oh*ow)
	fmt.Println(out)

	// The same product without packing.
	gemm.Sgemm(false, false, 1, oh*ow, kh*kw, 1, w, kh*kw, cols, oh*ow, 0, out, oh*ow)
	fmt.Println(out)
	// Output:
	// [-4 -4 -4 -4]
	// [-4 -4 -4 -4]
}
