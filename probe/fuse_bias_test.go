package probe

import (
	"fmt"
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/tensor"
)

// A MatMul whose product only the Add of a constant bias reads adds the
// bias in place when the product is unobserved: the hook gets nil for the
// product and, for every other value, exactly (bit for bit) what the
// unfused run gives (reference: the same model with nothing declared
// unobserved, where the Add kernel runs on its own), over batches that
// recycle buffers. Covered: Add(product, b) and Add(b, product), a bias of
// shape [1, n], a product of rank 3 and of rank 2, a bias that is a full
// matrix (no last-axis broadcast: the Add runs as usual), and a product
// read twice (never folded).
func TestBiasAddInPlace(t *testing.T) {
	r := rand.New(rand.NewSource(53))
	b := modelbuild.New("bias", 14)
	b.Input("x", []int{2, 5, 8}, true)
	init := randInit(b, r)
	b.Node("MatMul", "m0", []string{"x", init("w0", 8, 12)}, []string{"p0"})
	b.Node("Add", "a0", []string{"p0", init("b0", 12)}, []string{"y0"})
	b.Node("Relu", "r0", []string{"y0"}, []string{"z0"})
	b.Node("MatMul", "m1", []string{"z0", init("w1", 12, 6)}, []string{"p1"})
	b.Node("Add", "a1", []string{init("b1", 1, 6), "p1"}, []string{"y1"})
	b.Node("Flatten", "flat", []string{"y1"}, []string{"f1"}, modelbuild.Attr{Name: "axis", Value: 2})
	b.Node("MatMul", "m2", []string{"f1", init("w2", 6, 6)}, []string{"p2"})
	b.Node("Add", "a2", []string{"p2", init("b2", 10, 6)}, []string{"y2"})
	b.Node("MatMul", "m3", []string{"y2", init("w3", 6, 4)}, []string{"p3"})
	b.Node("Add", "a3", []string{"p3", init("b3", 4)}, []string{"y3"})
	b.Node("Mul", "twice", []string{"p3", "y3"}, []string{"out"})
	b.Output("out")
	_, p := planOf(t, b)
	marked := map[string]string{}
	for _, s := range p.Steps {
		if s.biasAdd >= 0 {
			marked[s.Node.Name] = p.Steps[s.biasAdd].Node.Name
		}
	}
	if want := map[string]string{"m0": "a0", "m1": "a1", "m2": "a2"}; fmt.Sprint(marked) != fmt.Sprint(want) {
		t.Fatalf("bias adds %v, want %v", marked, want)
	}
	var batches []*tensor.Tensor
	for i := 0; i < 3; i++ {
		x := linRand(r, 2, 5, 8)
		x.F32()[3] = float32(math.NaN())
		batches = append(batches, x)
	}
	ref := recordRun(t, p, batches)
	got := recordRun(t, p, batches, map[string]bool{"p0": true, "p1": true, "p2": true, "p3": true})
	if len(got) != len(ref) {
		t.Fatalf("%d hook calls, unfused %d", len(got), len(ref))
	}
	nils := map[string]int{}
	for k := range got {
		if got[k].outs[0] == nil {
			nils[got[k].node]++
			got[k].outs[0] = ref[k].outs[0]
		}
	}
	// m2's bias is a full matrix and m3's product is read twice: written
	if want := map[string]int{"m0": 3, "m1": 3}; fmt.Sprint(nils) != fmt.Sprint(want) {
		t.Fatalf("unwritten products per node %v, want %v", nils, want)
	}
	sameRecords(t, got, ref)
}
