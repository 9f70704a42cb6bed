package probe

import (
	"fmt"
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/tensor"
)

// SiLU (x·sigmoid(x), exported as Sigmoid and Mul reading the same x) and
// the smooth activations fuse into the producing Conv, and the hook sees
// exactly the values of the unfused run (reference: the same plan with its
// fusion links removed, each node running its own kernel), bit for bit, on
// every path of the Conv: depthwise 5×5 and 3×3, a 1×1 on the GEMM, a 3×3
// dense conv on large planes (implicit GEMM per image).
func TestFusionSiLUHookSeesUnfusedValues(t *testing.T) {
	r := rand.New(rand.NewSource(41))
	b := modelbuild.New("silu", 14)
	b.Input("x", []int{2, 4, 40, 40}, true)
	init := randInit(b, r)
	i64 := func(v ...int64) []int64 { return v }
	// dense 3×3 on large planes → SiLU as Mul(x, s)
	b.Node("Conv", "c0", []string{"x", init("w0", 8, 4, 3, 3), init("b0", 8)}, []string{"y0"},
		modelbuild.Attr{Name: "pads", Value: i64(1, 1, 1, 1)})
	b.Node("Sigmoid", "s0", []string{"y0"}, []string{"g0"})
	b.Node("Mul", "m0", []string{"y0", "g0"}, []string{"a0"})
	// depthwise 5×5 stride 2 → SiLU as Mul(s, x)
	b.Node("Conv", "c1", []string{"a0", init("w1", 8, 1, 5, 5), init("b1", 8)}, []string{"y1"},
		modelbuild.Attr{Name: "group", Value: 8}, modelbuild.Attr{Name: "strides", Value: i64(2, 2)}, modelbuild.Attr{Name: "pads", Value: i64(2, 2, 2, 2)})
	b.Node("Sigmoid", "s1", []string{"y1"}, []string{"g1"})
	b.Node("Mul", "m1", []string{"g1", "y1"}, []string{"a1"})
	// 1×1 → HardSwish
	b.Node("Conv", "c2", []string{"a1", init("w2", 6, 8, 1, 1)}, []string{"y2"})
	b.Node("HardSwish", "hs", []string{"y2"}, []string{"a2"})
	// depthwise 3×3 → HardSigmoid
	b.Node("Conv", "c3", []string{"a2", init("w3", 6, 1, 3, 3)}, []string{"y3"},
		modelbuild.Attr{Name: "group", Value: 6}, modelbuild.Attr{Name: "pads", Value: i64(1, 1, 1, 1)})
	b.Node("HardSigmoid", "hsig", []string{"y3"}, []string{"a3"}, modelbuild.Attr{Name: "alpha", Value: float32(1.0 / 6)})
	// 1×1 → Tanh
	b.Node("Conv", "c4", []string{"a3", init("w4", 6, 6, 1, 1), init("b4", 6)}, []string{"y4"})
	b.Node("Tanh", "tanh", []string{"y4"}, []string{"a4"})
	// Sigmoid and a Mul of something else: a plain Sigmoid fusion is not possible
	// (two readers), nor a SiLU
	b.Node("Conv", "c5", []string{"a4", init("w5", 6, 6, 1, 1)}, []string{"y5"})
	b.Node("Sigmoid", "s5", []string{"y5"}, []string{"g5"})
	b.Node("Mul", "m5", []string{"y5", "a4"}, []string{"p5"})
	b.Node("Add", "add", []string{"p5", "g5"}, []string{"out"})
	b.Output("out")
	_, fused := planOf(t, b)
	_, plain := planOf(t, b)
	for i := range plain.Steps {
		plain.Steps[i].fuseWith, plain.Steps[i].fuseMul = -1, -1
	}
	got := map[string]string{}
	for i, s := range fused.Steps {
		if a := fused.fusedNode(i); a != nil {
			got[s.Node.Name] = a.Name
			if k := s.fuseMul; k >= 0 {
				got[s.Node.Name] += "+" + fused.Steps[k].Node.Name
			}
		}
	}
	want := map[string]string{"c0": "s0+m0", "c1": "s1+m1", "c2": "hs", "c3": "hsig", "c4": "tanh"}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Fatalf("fused %v, want %v", got, want)
	}
	var batches []*tensor.Tensor
	for i := 0; i < 3; i++ {
		x := linRand(r, 2, 4, 40, 40)
		for j := range x.F32() {
			x.F32()[j] *= 8 // reach the saturated ends of the activations
		}
		x.F32()[7] = float32(math.NaN())
		batches = append(batches, x)
	}
	a, c := recordRun(t, fused, batches), recordRun(t, plain, batches)
	if len(a) != len(c) || len(a) != 3*len(plain.Steps) {
		t.Fatalf("%d hook calls fused, %d unfused, want %d", len(a), len(c), 3*len(plain.Steps))
	}
	sameRecords(t, a, c)

	// a SiLU's sigmoid that no hook reads (vitals check: inside a recognised
	// composite activation) is left unwritten: the hook gets nil for it, and
	// every other value is still the unfused run's, bit for bit. The Sigmoid
	// s5 is read by the Add too: it is written although declared unobserved.
	// On each vector level this machine has (the pure Go one included),
	// against the unfused run on the same level.
	saved := actVecLevel
	defer func() { actVecLevel = saved }()
	for level := saved; level >= 0; level-- {
		actVecLevel = level
		c := recordRun(t, plain, batches) // the kernels' values at this level
		u := recordRun(t, fused, batches, map[string]bool{"g0": true, "g1": true, "g5": true})
		if len(u) != len(c) {
			t.Fatalf("level %d: %d hook calls with unobserved values, %d unfused", level, len(u), len(c))
		}
		nils := map[string]int{}
		for k := range u {
			if u[k].outs[0] == nil {
				nils[u[k].node]++
				u[k].outs[0] = c[k].outs[0]
			}
		}
		if fmt.Sprint(nils) != fmt.Sprint(map[string]int{"s0": 3, "s1": 3}) {
			t.Fatalf("level %d: unwritten values per node %v, want s0 and s1 in each of 3 batches", level, nils)
		}
		sameRecords(t, u, c)
	}
}
