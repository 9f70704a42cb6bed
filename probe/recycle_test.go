package probe

import (
	"math/rand"
	"slices"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// recycleTestModel: values whose storage outlives them through views, each
// followed by an allocation of the same size that would take that storage
// if it were handed back too early: Flatten views of a Relu
// output read after a Sigmoid of the same size, a Conv whose fused Clip
// output waits while same-sized values come and go, and a graph output that
// is a view of an intermediate value.
func recycleTestModel(t *testing.T, r *rand.Rand) *loader.Model {
	t.Helper()
	b := modelbuild.New("recycle", 13)
	b.Input("x", []int{2, 4, 32, 32}, true) // 8,192 values a batch: above the pool's minimum
	b.Init("wpw", []int{4, 4, 1, 1}, linRand(r, 16).F32())
	b.Init("lo", nil, []float32{0})
	b.Init("hi", nil, []float32{0.5})
	b.Node("Relu", "relu", []string{"x"}, []string{"a"})
	b.Node("Flatten", "flat", []string{"a"}, []string{"af"}) // a dies here; af is a view of it
	b.Node("Sigmoid", "sig", []string{"x"}, []string{"s"})   // same size as a
	b.Node("Flatten", "flat2", []string{"s"}, []string{"sf"})
	b.Node("Add", "add", []string{"af", "sf"}, []string{"u"})
	b.Node("Conv", "pw", []string{"x", "wpw"}, []string{"c"})
	b.Node("Clip", "clip", []string{"c", "lo", "hi"}, []string{"cc"})
	b.Node("Neg", "neg", []string{"x"}, []string{"n"})
	b.Node("Flatten", "flat3", []string{"n"}, []string{"nf"}) // n dies; nf lives on as a graph output
	b.Node("Tanh", "tanh", []string{"u"}, []string{"tu"})
	b.Node("Flatten", "flat4", []string{"cc"}, []string{"ccf"})
	b.Node("Mul", "mul", []string{"tu", "ccf"}, []string{"y"})
	b.Output("y")
	b.Output("nf")
	return BuiltModel(t, b)
}

// A run that hands dead values' storage back to the pool within the batch
// (RunRecycled with tensor.Pool.Put, as vitals check does) gives, over
// batches, exactly the outputs and hook values of a plain run without a
// pool (reference: Run, every value in storage of its own).
func TestRecycledRunMatchesPlainRun(t *testing.T) {
	r := rand.New(rand.NewSource(7))
	m := recycleTestModel(t, r)
	p, err := Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	var batches []*tensor.Tensor
	for range 3 {
		batches = append(batches, linRand(r, 2*4*32*32).Reshaped([]int{2, 4, 32, 32}))
	}
	type rec struct {
		node string
		vals [][]float32
	}
	record := func(list *[]rec) Hook {
		return func(n *loader.Node, outs []*tensor.Tensor) error {
			e := rec{node: n.Name}
			for _, o := range outs {
				e.vals = append(e.vals, slices.Clone(o.F32()))
			}
			*list = append(*list, e)
			return nil
		}
	}
	var want, got []rec
	var wantOut, gotOut [][]float32
	for _, x := range batches {
		outs, err := p.Run(map[string]*tensor.Tensor{"x": x}, record(&want))
		if err != nil {
			t.Fatal(err)
		}
		wantOut = append(wantOut, slices.Clone(outs["y"].F32()), slices.Clone(outs["nf"].F32()))
	}
	pool := tensor.NewPool(1 << 30)
	arena := &tensor.Arena{Pool: pool}
	handed := 0
	dead := func(t *tensor.Tensor) { handed++; pool.Put(t) }
	for _, x := range batches {
		outs, released, err := p.RunRecycled(arena, map[string]*tensor.Tensor{"x": x}, record(&got), dead, nil)
		if err != nil {
			t.Fatal(err)
		}
		gotOut = append(gotOut, slices.Clone(outs["y"].F32()), slices.Clone(outs["nf"].F32()))
		pool.Recycle(released, []*tensor.Tensor{x, outs["y"], outs["nf"]})
	}
	if handed == 0 {
		t.Fatal("no value was handed back within a batch")
	}
	if len(got) != len(want) {
		t.Fatalf("hook called %d times, want %d", len(got), len(want))
	}
	for i := range want {
		if got[i].node != want[i].node {
			t.Fatalf("hook call %d: node %s, want %s", i, got[i].node, want[i].node)
		}
		for j := range want[i].vals {
			if !slices.Equal(got[i].vals[j], want[i].vals[j]) {
				t.Errorf("batch %d, node %s output %d differs from the plain run", i/len(p.Steps), want[i].node, j)
			}
		}
	}
	for i := range wantOut {
		if !slices.Equal(gotOut[i], wantOut[i]) {
			t.Errorf("batch %d, graph output %d differs from the plain run", i/2, i%2)
		}
	}
}

// A value released while a view of it lives is kept for after the batch;
// when the view dies and the storage goes back, that stale value is dropped
// (the storage may hold later values before the batch ends), and two dead
// views of one buffer hand it back once.
func TestRecyclerSettle(t *testing.T) {
	base := tensor.From(make([]float32, 8), 8)
	view := base.Reshaped([]int{2, 4})
	other := tensor.From(make([]float32, 8), 8)
	var handed []*tensor.Tensor
	r := &recycler{live: map[string]*tensor.Tensor{"view": view}, dead: func(t *tensor.Tensor) { handed = append(handed, t) }}
	released := r.settle([]*tensor.Tensor{base}, nil, nil)
	if len(released) != 1 || len(handed) != 0 {
		t.Fatalf("with a live view: released %d, handed %d; want 1, 0", len(released), len(handed))
	}
	delete(r.live, "view")
	released = r.settle([]*tensor.Tensor{view, other}, nil, released)
	if len(handed) != 2 || handed[0] != view || handed[1] != other {
		t.Fatalf("handed %v, want the view and the other value", handed)
	}
	if len(released) != 0 {
		t.Fatalf("released %d values, want 0: the stale base must be dropped", len(released))
	}
	// two dead views of one buffer in one step; a fused output ahead blocks
	handed = nil
	a, b := tensor.From(make([]float32, 8), 8), tensor.From(make([]float32, 8), 8)
	released = r.settle([]*tensor.Tensor{a, a.Reshaped([]int{8, 1}), b}, map[int]*tensor.Tensor{3: b.Reshaped([]int{1, 8})}, nil)
	if len(handed) != 1 || handed[0] != a || len(released) != 1 || released[0] != b {
		t.Fatalf("handed %d, released %d: want a once, and b kept back", len(handed), len(released))
	}
}
