package probe_test

// The transformer operators against ONNX Runtime (npm onnxruntime-node
// 1.30.0): one-node models and outputs in testdata/transformer/ops, written by
// testdata/gen/transformer_ops.sh. Semantics: ONNX Operators.md (Attention,
// RotaryEmbedding, opset 23) and onnxruntime docs/ContribOperators.md (the
// com.microsoft operators). BiasAdd's expected output is NumPy's X + bias +
// skip (ONNX Runtime implements it for CUDA only).

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

func TestTransformerOpsMatchORT(t *testing.T) {
	models, _ := filepath.Glob("../testdata/transformer/ops/*.onnx")
	if len(models) < 24 {
		t.Fatalf("found %d operator models in testdata/transformer/ops, want the 24 of transformer_ops.py", len(models))
	}
	for _, mp := range models {
		name := strings.TrimSuffix(filepath.Base(mp), ".onnx")
		t.Run(name, func(t *testing.T) {
			base := strings.TrimSuffix(mp, ".onnx")
			m, err := loader.LoadModel(mp)
			if err != nil {
				t.Fatal(err)
			}
			plan, err := probe.Compile(m)
			if err != nil {
				t.Fatal(err)
			}
			ins := map[string]*tensor.Tensor{}
			for i, vi := range m.Graph.Inputs {
				x, err := loader.ReadNpy(fmt.Sprintf("%s.in%d.npy", base, i))
				if err != nil {
					t.Fatal(err)
				}
				ins[vi.Name] = x
			}
			got, err := plan.Run(ins, nil)
			if err != nil {
				t.Fatal(err)
			}
			checked := 0
			for i, vo := range m.Graph.Outputs {
				p := fmt.Sprintf("%s.out%d.npy", base, i)
				if _, err := os.Stat(p); err != nil {
					t.Fatalf("output %q: no expected file %s", vo.Name, p)
				}
				want, err := loader.ReadNpy(p)
				if err != nil {
					t.Fatal(err)
				}
				g := got[vo.Name]
				if g == nil {
					t.Fatalf("output %q not produced", vo.Name)
				}
				if !tensor.SameShape(g.Shape, want.Shape) {
					t.Fatalf("output %q: shape %v, ONNX Runtime %v", vo.Name, g.Shape, want.Shape)
				}
				worst := 0.0
				for j := 0; j < want.Size(); j++ {
					a, b := g.Float64At(j), want.Float64At(j)
					if d := math.Abs(a - b); d > worst || (math.IsNaN(a) != math.IsNaN(b)) {
						worst = d
						if math.IsNaN(a) != math.IsNaN(b) {
							worst = math.Inf(1)
						}
					}
				}
				if worst > 1e-4 {
					t.Errorf("output %q: max |vitals − ONNX Runtime| = %.3g > 1e-4", vo.Name, worst)
				}
				checked++
			}
			if checked == 0 {
				t.Fatal("no output compared")
			}
		})
	}
}
