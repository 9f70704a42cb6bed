package probe

import (
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

// Broadcasts done as runs give the same bits as binaryLoop (applyArith),
// NaN for NaN, on the shapes arithF32Fast leaves to the general loop.
func TestArithF32RunsMatchesBinaryLoop(t *testing.T) {
	r := rand.New(rand.NewSource(21))
	pairs := [][2][]int{
		{{2, 4, 3, 49, 49}, {1, 4, 1, 49, 49}}, // Swin's window mask
		{{2, 1, 64}, {1, 300, 64}},             // both broadcast
		{{3, 5, 40}, {3, 1, 40}},               // middle axis repeated
		{{3, 5, 40}, {3, 5, 1}},                // per-row scalar, run of 40
		{{2, 3, 4, 50}, {3, 1, 50}},            // two blocks
		{{1, 300, 64}, {2, 1, 64}},             // swapped roles
		{{2, 3, 17, 20}, {2, 1, 17, 1}},        // operand repeated along the run
		{{16, 200, 130}, {16, 1, 130}},         // parallel
		{{3, 5, 7}, {3, 1, 7}},                 // short runs: refused
	}
	for _, pr := range pairs {
		a, b := tensor.New(tensor.Float32, pr[0]), tensor.New(tensor.Float32, pr[1])
		copy(a.F32(), specialF32(r, a.Size()))
		copy(b.F32(), specialF32(r, b.Size()))
		os, err := Broadcast(a.Shape, b.Shape)
		if err != nil {
			t.Fatal(err)
		}
		for _, op := range []opID{addT, subT, mulT, divT} {
			want, got := tensor.New(tensor.Float32, os), tensor.New(tensor.Float32, os)
			applyArith(op, want.F32(), os, a.F32(), a.Shape, b.F32(), b.Shape)
			if !arithF32Runs(op, got.F32(), os, a.F32(), a.Shape, b.F32(), b.Shape) {
				if pr[0][len(pr[0])-1] >= elemRunMin {
					t.Fatalf("%v op %d %v: refused", pr[0], op, pr[1])
				}
				continue
			}
			for i, w := range want.F32() {
				g := got.F32()[i]
				if math.Float32bits(g) != math.Float32bits(w) && !(g != g && w != w) {
					t.Fatalf("%v op %d %v: element %d = %g, want %g", pr[0], op, pr[1], i, g, w)
				}
			}
		}
	}
}

func BenchmarkArithSwinMask(b *testing.B) {
	a := make([]float32, 8*16*3*49*49)
	m := make([]float32, 16*49*49)
	out := make([]float32, len(a))
	as, ms := []int{8, 16, 3, 49, 49}, []int{1, 16, 1, 49, 49}
	b.Run("loop", func(b *testing.B) {
		for b.Loop() {
			applyArith(addT, out, as, a, as, m, ms)
		}
	})
	b.Run("runs", func(b *testing.B) {
		for b.Loop() {
			arithF32Runs(addT, out, as, a, as, m, ms)
		}
	})
}
