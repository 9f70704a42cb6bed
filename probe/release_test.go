package probe

import (
	"fmt"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/tensor"
)

// Each intermediate value is released right after its last consumer, so a
// chain of n nodes keeps O(1) activations alive, not n; graph outputs are kept.
func TestValuesReleasedAfterLastConsumer(t *testing.T) {
	const n = 40
	b := modelbuild.New("chain", 13)
	b.Input("x", []int{1, 8}, true)
	prev := "x"
	for i := 0; i < n; i++ {
		prev = b.Node("Relu", fmt.Sprintf("r%d", i), []string{prev}, []string{fmt.Sprintf("v%d", i)})
	}
	// a skip connection: v0 is read again by the last node
	b.Node("Add", "skip", []string{prev, "v0"}, []string{"y"})
	b.Output("y")
	_, p := planOf(t, b)
	freedAt := map[string]int{}
	for i, names := range p.release {
		for _, name := range names {
			freedAt[name] = i
		}
	}
	for i := 1; i < n; i++ {
		v := fmt.Sprintf("v%d", i)
		if freedAt[v] != i+1 && !(i == n-1 && freedAt[v] == n) {
			t.Errorf("%s freed after step %d, want %d", v, freedAt[v], i+1)
		}
	}
	if freedAt["v0"] != n {
		t.Errorf("v0 (read by the skip Add at step %d) freed after step %d", n, freedAt["v0"])
	}
	if _, ok := freedAt["y"]; ok {
		t.Error("the graph output must not be released")
	}
	out, err := p.Run(map[string]*tensor.Tensor{"x": tensor.New(tensor.Float32, []int{2, 8})}, nil)
	if err != nil || out["y"] == nil {
		t.Fatal(err)
	}
}
