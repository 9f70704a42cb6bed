package probe

import (
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/internal/modeltest"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// A bias that reaches Conv through Identity (as exporters emit for shared
// constants) is still recognised as an initializer: the convolution packs it
// into the weights (kind 'b' in the pack cache), and the result equals the
// reference convolution's.
func TestInitializerThroughIdentity(t *testing.T) {
	r := rand.New(rand.NewSource(5))
	w := linRand(r, 4, 3, 3, 3)
	bias := linRand(r, 4)
	b := modelbuild.New("conv", 13)
	b.Input("x", []int{1, 3, 9, 9}, true)
	b.Init("W", w.Shape, w.F32())
	b.Init("B", bias.Shape, bias.F32())
	b.Node("Identity", "id", []string{"B"}, []string{"B2"})
	b.Node("Conv", "conv", []string{"x", "W", "B2"}, []string{"y"},
		modelbuild.Attr{Name: "pads", Value: []int64{1, 1, 1, 1}})
	b.Output("y")
	m, p := planOf(t, b)
	x := linRand(r, 2, 3, 9, 9)
	out, err := p.Run(map[string]*tensor.Tensor{"x": x}, nil)
	if err != nil {
		t.Fatal(err)
	}
	found := false
	packCache.Range(func(k, _ any) bool {
		key := k.(packKey)
		if key.kind == 'b' && key.t.Value() == m.Graph.Initializers["W"] && key.aux.Value() == m.Graph.Initializers["B"] {
			found = true
		}
		return true
	})
	if !found {
		t.Error("the bias passed on by Identity was not packed with the weights")
	}
	var want []float32
	withReference(func() {
		ref, err := p.Run(map[string]*tensor.Tensor{"x": x}, nil)
		if err != nil {
			t.Fatal(err)
		}
		want = ref["y"].F32()
	})
	closeF32(t, "conv through Identity", out["y"].F32(), want, 1e-4)
}

// BuiltModel serialises and decodes a built model, failing the test on an
// error (exported for the package's external tests too).
func BuiltModel(t testing.TB, b *modelbuild.Builder) *loader.Model {
	t.Helper()
	return modeltest.Model(t, b)
}

// planOf is BuiltModel then Compile, failing the test on any error.
func planOf(t testing.TB, b *modelbuild.Builder) (*loader.Model, *Plan) {
	t.Helper()
	m := BuiltModel(t, b)
	p, err := Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	return m, p
}
