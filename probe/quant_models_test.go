package probe_test

import (
	"math"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// The quantized models of testdata/gen/quant_models.py (QDQ, bad-scale QDQ,
// dynamic, operator-oriented with ONNX and com.microsoft operators) against
// ONNX Runtime 1.30.0 (onnxruntime-node, testdata/gen/quant_ort.js) on the first
// 64 images of the digits sample: integer outputs exactly, float outputs within
// 1e-4 relative (plus 1e-6 absolute for values near zero).
func TestQuantizedModelsMatchOnnxRuntime(t *testing.T) {
	x, err := loader.ReadNpy("../testdata/ref/digits_sample_nchw.npy")
	if err != nil {
		t.Fatal(err)
	}
	const n = 64
	per := x.Size() / x.Shape[0]
	in := tensor.From(append([]float32{}, x.F32()[:n*per]...), append([]int{n}, x.Shape[1:]...)...)
	refs, _ := filepath.Glob("../testdata/quant/ort/*.npy")
	byModel := map[string][]string{}
	for _, r := range refs {
		model, _, _ := strings.Cut(filepath.Base(r), ".")
		byModel[model] = append(byModel[model], r)
	}
	if len(byModel) < 6 {
		t.Fatalf("expected ONNX Runtime outputs of 6 models in testdata/quant/ort, found %d", len(byModel))
	}
	models := make([]string, 0, len(byModel))
	for m := range byModel {
		models = append(models, m)
	}
	sort.Strings(models)
	for _, name := range models {
		m, err := loader.LoadModel(filepath.Join("../testdata/quant", name+".onnx"))
		if err != nil {
			t.Fatal(err)
		}
		p, err := probe.Compile(m)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		got, err := p.Run(map[string]*tensor.Tensor{"input": in}, nil)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		for _, r := range byModel[name] {
			out := strings.TrimSuffix(strings.TrimPrefix(filepath.Base(r), name+"."), ".npy")
			want, err := loader.ReadNpy(r)
			if err != nil {
				t.Fatal(err)
			}
			g := got[out]
			if g == nil || !tensor.SameShape(g.Shape, want.Shape) || g.DType != want.DType {
				t.Errorf("%s %s: got %v, want %v%v", name, out, g, want.DType, want.Shape)
				continue
			}
			bad, worst := 0, 0.0
			for i := 0; i < want.Size(); i++ {
				gv, wv := g.Float64At(i), want.Float64At(i)
				d := math.Abs(gv - wv)
				if want.DType == tensor.Float32 {
					if d > 1e-4*math.Abs(wv)+1e-6 {
						bad++
					}
				} else if d != 0 {
					bad++
				}
				worst = math.Max(worst, d)
			}
			if bad > 0 {
				t.Errorf("%s %s (%v): %d of %d values differ from ONNX Runtime, largest difference %g", name, out, want.DType, bad, want.Size(), worst)
			}
		}
	}
}
