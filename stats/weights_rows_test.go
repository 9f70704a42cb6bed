package stats

import (
	"math"
	"math/rand/v2"
	"testing"
)

// Identical and all-zero rows of a weight, counted through the row hashes
// (rowHashes: plain rows four at a time, or a MatMul weight's columns side
// by side), against a direct count that compares every pair of rows bit for
// bit: planted copies of rows and columns, all-zero ones, −0 (a zero) and
// NaN (not a zero, equal to its own copy bit for bit), on matrices whose
// row counts are and are not multiples of four.
func TestIdenticalRowsMatchPairwise(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	for _, dims := range [][2]int{{1, 5}, {7, 3}, {12, 16}, {33, 9}, {64, 40}} {
		for _, byCols := range []bool{false, true} {
			R, C := dims[0], dims[1] // the matrix as stored: R × C
			x := make([]float32, R*C)
			for i := range x {
				x[i] = float32(rng.IntN(3)) // few values: some accidental equal rows too
			}
			units, unitLen := R, C
			at := func(u, j int) *float32 { return &x[u*C+j] }
			if byCols {
				units, unitLen = C, R
				at = func(u, j int) *float32 { return &x[j*C+u] }
			}
			for k := 0; k < units/3; k++ { // copies, zeros, −0 and NaN
				a, b := rng.IntN(units), rng.IntN(units)
				for j := 0; j < unitLen; j++ {
					*at(b, j) = *at(a, j)
				}
				z := rng.IntN(units)
				for j := 0; j < unitLen; j++ {
					*at(z, j) = 0
				}
				*at(z, rng.IntN(unitLen)) = float32(math.Copysign(0, -1))
				*at(rng.IntN(units), rng.IntN(unitLen)) = float32(math.NaN())
			}
			row := func(u int, buf []float32) []float32 {
				for j := range buf {
					buf[j] = *at(u, j)
				}
				return buf
			}
			h, nz := rowHashes(x, units, unitLen, byCols)
			ident, zero := identicalRows(unitLen, row, h, nz)
			// direct: every pair, bit for bit
			wantIdent, wantZero := 0, 0
			a, b := make([]float32, unitLen), make([]float32, unitLen)
			for u := 0; u < units; u++ {
				row(u, a)
				allZero := true
				for _, v := range a {
					if v != 0 {
						allZero = false
					}
				}
				if allZero {
					wantZero++
					continue
				}
				for w := 0; w < units; w++ {
					if w != u && sameBits(a, row(w, b)) {
						wantIdent++
						break
					}
				}
			}
			if ident != wantIdent || zero != wantZero {
				t.Fatalf("%v byCols=%v: %d identical, %d zero; want %d, %d", dims, byCols, ident, zero, wantIdent, wantZero)
			}
		}
	}
}
