package probe

import (
	"fmt"
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/internal/actkind"
	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// fuseTestModel: a small MobileNet-like graph at opset 13 with every kind of
// Conv → activation link: depthwise → Clip with bounds from Constant nodes
// placed between the two (as exporters write ReLU6), 1×1 → Relu, 3×3 dense →
// LeakyRelu, 1×1 → Clip with initializer bounds, a Conv read by a Clip and
// by an Add (not fusable), and a Conv → Relu whose Conv output is a graph output.
func fuseTestModel(t *testing.T, r *rand.Rand) *loader.Model {
	t.Helper()
	b := modelbuild.New("fuse", 13)
	b.Input("x", []int{2, 4, 13, 11}, true)
	init := func(name string, shape ...int) string {
		n := 1
		for _, d := range shape {
			n *= d
		}
		b.Init(name, shape, linRand(r, n).F32())
		return name
	}
	i64 := func(v ...int64) []int64 { return v }
	b.Init("lo", nil, []float32{0})
	b.Init("hi", nil, []float32{0.5})
	// depthwise 3×3 stride 2 → Clip(Constant 0, Constant 0.7)
	b.Node("Conv", "dw", []string{"x", init("wdw", 4, 1, 3, 3), init("bdw", 4)}, []string{"c1"},
		modelbuild.Attr{Name: "group", Value: 4}, modelbuild.Attr{Name: "strides", Value: i64(2, 2)}, modelbuild.Attr{Name: "pads", Value: i64(1, 1, 1, 1)})
	b.Node("Constant", "k0", nil, []string{"k0"}, modelbuild.Attr{Name: "value_float", Value: float32(0)})
	b.Node("Constant", "k1", nil, []string{"k1"}, modelbuild.Attr{Name: "value_float", Value: float32(0.7)})
	b.Node("Clip", "relu6", []string{"c1", "k0", "k1"}, []string{"a1"})
	// 1×1 → Relu
	b.Node("Conv", "pw", []string{"a1", init("wpw", 8, 4, 1, 1)}, []string{"c2"})
	b.Node("Relu", "relu", []string{"c2"}, []string{"a2"})
	// 3×3 dense → LeakyRelu
	b.Node("Conv", "dense", []string{"a2", init("wd", 6, 8, 3, 3), init("bd", 6)}, []string{"c3"},
		modelbuild.Attr{Name: "pads", Value: i64(1, 1, 1, 1)})
	b.Node("LeakyRelu", "leaky", []string{"c3"}, []string{"a3"}, modelbuild.Attr{Name: "alpha", Value: float32(0.1)})
	// 1×1 → Clip(initializers)
	b.Node("Conv", "pw2", []string{"a3", init("wpw2", 6, 6, 1, 1), init("bpw2", 6)}, []string{"c4"})
	b.Node("Clip", "clip", []string{"c4", "lo", "hi"}, []string{"a4"})
	// two readers: not fused
	b.Node("Conv", "pw3", []string{"a4", init("wpw3", 6, 6, 1, 1)}, []string{"c5"})
	b.Node("Clip", "clip2", []string{"c5", "lo", ""}, []string{"a5"})
	b.Node("Add", "add", []string{"a5", "c5"}, []string{"s"})
	// Conv output also a graph output
	b.Node("Conv", "dw2", []string{"s", init("wdw2", 6, 1, 3, 3)}, []string{"c6"},
		modelbuild.Attr{Name: "group", Value: 6}, modelbuild.Attr{Name: "pads", Value: i64(1, 0, 1, 2)})
	b.Node("Relu", "relu_out", []string{"c6"}, []string{"y"})
	b.Output("y")
	b.Output("c6")
	return BuiltModel(t, b)
}

// randInit returns a function that adds an initializer of the given shape
// with linRand values to b and returns its name.
func randInit(b *modelbuild.Builder, r *rand.Rand) func(name string, shape ...int) string {
	return func(name string, shape ...int) string {
		b.Init(name, shape, linRand(r, shape...).F32())
		return name
	}
}

type hookRecord struct {
	node string
	outs [][]float32
}

// recordRun runs the batches through RunRecycled with a pool recycling the
// released buffers within and between batches (as vitals check does) and
// records, in call order, a copy of every output the hook sees (nil for a
// value left unwritten: the run's unobserved, if any, name them).
func recordRun(t *testing.T, p *Plan, batches []*tensor.Tensor, unobserved ...map[string]bool) []hookRecord {
	t.Helper()
	pool := tensor.NewPool(1 << 30)
	arena := &tensor.Arena{Pool: pool}
	var recs []hookRecord
	hook := func(n *loader.Node, outs []*tensor.Tensor) error {
		rec := hookRecord{node: n.Name}
		for _, o := range outs {
			if o == nil {
				rec.outs = append(rec.outs, nil)
				continue
			}
			rec.outs = append(rec.outs, append([]float32{}, o.F32()...))
		}
		recs = append(recs, rec)
		return nil
	}
	var skip map[string]bool
	if len(unobserved) > 0 {
		skip = unobserved[0]
	}
	for _, x := range batches {
		outs, released, err := p.RunRecycled(arena, map[string]*tensor.Tensor{"x": x}, hook, pool.Put, skip)
		if err != nil {
			t.Fatal(err)
		}
		keep := []*tensor.Tensor{x}
		for _, o := range outs {
			keep = append(keep, o)
		}
		pool.Recycle(released, keep)
	}
	return recs
}

// The hook sees the Conv outputs and the activation outputs of a fused run
// with exactly (bit for bit) the values of the unfused run (reference: the
// same plan with every fusion link removed, so each activation runs its own
// kernel), in the same node order, over batches that recycle buffers.
func TestFusionHookSeesUnfusedValues(t *testing.T) {
	r := rand.New(rand.NewSource(31))
	m := fuseTestModel(t, r)
	fusedPlan, err := Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]string{"dw": "relu6", "pw": "relu", "dense": "leaky", "pw2": "clip", "dw2": "relu_out"}
	got := map[string]string{}
	for i, s := range fusedPlan.Steps {
		if a := fusedPlan.fusedNode(i); a != nil {
			got[s.Node.Name] = a.Name
		}
	}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Fatalf("fused pairs %v, want %v", got, want)
	}
	plain, err := Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	for i := range plain.Steps {
		plain.Steps[i].fuseWith = -1
	}
	var batches []*tensor.Tensor
	for i := 0; i < 3; i++ {
		x := linRand(r, 2, 4, 13, 11)
		x.F32()[5] = float32(math.NaN())
		batches = append(batches, x)
	}
	a, b := recordRun(t, fusedPlan, batches), recordRun(t, plain, batches)
	if len(a) != len(b) || len(a) != 3*len(plain.Steps) {
		t.Fatalf("fused run made %d hook calls, unfused %d, want %d", len(a), len(b), 3*len(plain.Steps))
	}
	for k := range b {
		if a[k].node != b[k].node {
			t.Fatalf("hook call %d: node %q, unfused run had %q", k, a[k].node, b[k].node)
		}
		for o := range b[k].outs {
			x, y := a[k].outs[o], b[k].outs[o]
			if len(x) != len(y) {
				t.Fatalf("node %q output %d: %d values, want %d", a[k].node, o, len(x), len(y))
			}
			for e := range y {
				if math.Float32bits(x[e]) != math.Float32bits(y[e]) {
					t.Fatalf("call %d node %q output %d element %d = %g, unfused %g", k, a[k].node, o, e, x[e], y[e])
				}
			}
		}
	}
}

// A Clip whose bound is computed by a node after the Conv (not a Constant)
// is not fused; nor is an activation read inside a subgraph-free graph by
// two nodes (checked above); nor a Conv whose output is read twice by one node.
func TestFusionNeedsEarlyBoundsAndOneReader(t *testing.T) {
	r := rand.New(rand.NewSource(32))
	b := modelbuild.New("nofuse", 13)
	b.Input("x", []int{1, 2, 5, 5}, true)
	b.Init("w", []int{2, 1, 3, 3}, linRand(r, 18).F32())
	b.Init("six", nil, []float32{6})
	b.Node("Conv", "conv", []string{"x", "w"}, []string{"c"}, modelbuild.Attr{Name: "group", Value: 2})
	b.Node("Neg", "neg", []string{"six"}, []string{"m6"})
	b.Node("Clip", "clip", []string{"c", "m6", "six"}, []string{"y"})
	b.Node("Conv", "conv2", []string{"y", "w"}, []string{"c2"}, modelbuild.Attr{Name: "group", Value: 2})
	b.Node("Clip", "clip2", []string{"c2", "c2"}, []string{"y2"})
	b.Output("y2")
	data, _ := b.Bytes()
	m, err := loader.DecodeModel(data, "")
	if err != nil {
		t.Fatal(err)
	}
	p, err := Compile(m)
	if err != nil {
		t.Fatal(err)
	}
	for i, s := range p.Steps {
		if a := p.fusedNode(i); a != nil {
			t.Errorf("%s fused with %s", s.Node.Name, a.Name)
		}
	}
}

// The same, for planes large enough (P ≥ convBatchMinP) that each image gets
// its own product: a 3×3 Conv → Relu on the implicit GEMM (activation per
// image and group) and a 1×1 Conv → Clip that reads X in place (activation
// per image after the product).
func TestFusionLargePlanes(t *testing.T) {
	r := rand.New(rand.NewSource(32))
	b := modelbuild.New("large", 13)
	b.Input("x", []int{2, 3, 48, 48}, true)
	init := randInit(b, r)
	b.Node("Conv", "c3", []string{"x", init("w3", 5, 3, 3, 3), init("b3", 5)}, []string{"y3"},
		modelbuild.Attr{Name: "pads", Value: []int64{1, 1, 1, 1}})
	b.Node("Relu", "relu", []string{"y3"}, []string{"a3"})
	b.Node("Conv", "c1", []string{"a3", init("w1", 4, 5, 1, 1), init("b1", 4)}, []string{"y1"})
	b.Node("Clip", "clip", []string{"y1", init("lo", 1), init("hi", 1)}, []string{"out"})
	b.Output("out")
	batches := []*tensor.Tensor{linRand(r, 2, 3, 48, 48), linRand(r, 2, 3, 48, 48)}
	fusionSameBits(t, b, 2, batches)
}

// The fusion table and the one list of activation operators agree: every
// operator with a fused float32 function is an activation marked Fusable,
// and every activation marked Fusable has one, so that a change to either
// shows up here.
func TestFusableActsMatchActivationList(t *testing.T) {
	for op := range fusableActs {
		if !actkind.Is(op) || !actkind.Fusable(op) {
			t.Errorf("fusableActs has %s, which internal/actkind does not mark Fusable", op)
		}
	}
	for _, op := range actkind.Names() {
		if _, ok := fusableActs[op]; actkind.Fusable(op) && !ok {
			t.Errorf("internal/actkind marks %s Fusable but fusableActs has no function for it", op)
		}
	}
}

// Every activation operator in the list is one the executor runs.
func TestActivationListIsRegistered(t *testing.T) {
	for _, op := range actkind.Names() {
		if len(registry[opKey{"", op}]) == 0 {
			t.Errorf("internal/actkind lists %s but the executor has no kernel for it", op)
		}
	}
}

// BatchNormalization (inference) as the producer: a pre-activation
// network's BatchNormalization → Relu (DenseNet) and BatchNormalization →
// x·sigmoid(x), fused and unfused, give the hook the same bits at every
// node, and normAffineF32's planes equal normAffine's loop.
func TestFusionBatchNormProducer(t *testing.T) {
	r := rand.New(rand.NewSource(33))
	b := modelbuild.New("bnact", 15)
	b.Input("x", []int{3, 6, 9, 11}, true)
	init := func(name string, shape []int, v []float32) string {
		b.Init(name, shape, v)
		return name
	}
	bnInputs := func(p string) []string {
		v := linRand(r, 6).F32()
		for i := range v {
			v[i] = 0.5 + v[i]*v[i] // a positive variance
		}
		return []string{init(p+"s", []int{6}, linRand(r, 6).F32()), init(p+"b", []int{6}, linRand(r, 6).F32()),
			init(p+"m", []int{6}, linRand(r, 6).F32()), init(p+"v", []int{6}, v)}
	}
	b.Node("BatchNormalization", "bn1", append([]string{"x"}, bnInputs("bn1")...), []string{"n1"})
	b.Node("Relu", "relu", []string{"n1"}, []string{"a1"})
	b.Node("BatchNormalization", "bn2", append([]string{"a1"}, bnInputs("bn2")...), []string{"n2"})
	b.Node("Sigmoid", "sig", []string{"n2"}, []string{"s2"})
	b.Node("Mul", "silu", []string{"n2", "s2"}, []string{"out"})
	b.Output("out")
	fusionSameBits(t, b, 2, []*tensor.Tensor{linRand(r, 3, 6, 9, 11), linRand(r, 3, 6, 9, 11)})
	// the vector planes against the scalar loop (planes of 99 and of 7 values)
	for _, inner := range []int{99, 7} {
		x := linRand(r, 2*3*inner).F32()
		k, o := []float64{0.3, -1.7, 2.5}, []float64{0.1, 0, -0.4}
		want, got := make([]float32, len(x)), make([]float32, len(x))
		normAffine(want, x, 2, 3, inner, k, o)
		normAffineF32(got, x, 2, 3, inner, k, o, nil, nil)
		for i := range want {
			if math.Float32bits(got[i]) != math.Float32bits(want[i]) {
				t.Fatalf("inner %d: element %d = %g, normAffine %g", inner, i, got[i], want[i])
			}
		}
	}
}

// fusionSameBits plans the model of b twice, one plan with its fusions
// undone, checks that the other links want producer/activation pairs, runs
// both on batches and fails unless every hook call sees the same bits.
func fusionSameBits(t *testing.T, b *modelbuild.Builder, want int, batches []*tensor.Tensor) {
	t.Helper()
	_, fused := planOf(t, b)
	_, plain := planOf(t, b)
	for i := range plain.Steps {
		plain.Steps[i].fuseWith, plain.Steps[i].fuseMul = -1, -1
	}
	n := 0
	for i := range fused.Steps {
		if fused.fusedNode(i) != nil {
			n++
		}
	}
	if n != want {
		t.Fatalf("%d fused links, want %d", n, want)
	}
	sameRecords(t, recordRun(t, fused, batches), recordRun(t, plain, batches))
}

// sameRecords fails unless the hook calls a (fused) and c (unfused) are
// for the same nodes in the same order with the same bits.
func sameRecords(t *testing.T, a, c []hookRecord) {
	t.Helper()
	if len(a) != len(c) {
		t.Fatalf("%d hook calls fused, %d unfused", len(a), len(c))
	}
	for k := range c {
		if a[k].node != c[k].node {
			t.Fatalf("hook call %d: node %q, unfused %q", k, a[k].node, c[k].node)
		}
		for o := range c[k].outs {
			if len(a[k].outs[o]) != len(c[k].outs[o]) {
				t.Fatalf("node %q output %d: %d values, unfused %d", c[k].node, o, len(a[k].outs[o]), len(c[k].outs[o]))
			}
			for e, w := range c[k].outs[o] {
				if g := a[k].outs[o][e]; math.Float32bits(g) != math.Float32bits(w) {
					t.Fatalf("node %q element %d = %g, unfused %g", c[k].node, e, g, w)
				}
			}
		}
	}
}
