package probe

import (
	"fmt"
	"math"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// fuzzBytes hands out a fuzz input as small decisions; past its end it gives zeros.
type fuzzBytes struct {
	b []byte
	i int
}

func (r *fuzzBytes) byte() byte {
	if r.i >= len(r.b) {
		return 0
	}
	v := r.b[r.i]
	r.i++
	return v
}

func (r *fuzzBytes) intn(n int) int { return int(r.byte()) % n }

// small is an integer in [lo, hi].
func (r *fuzzBytes) small(lo, hi int) int { return lo + r.intn(hi-lo+1) }

func (r *fuzzBytes) shape() []int {
	s := make([]int, r.intn(5)) // rank 0..4
	for i := range s {
		s[i] = r.small(0, 4)
		if s[i] == 0 && r.intn(4) != 0 {
			s[i] = 1 // zero-size dims now and then, not most of the time
		}
	}
	return s
}

func (r *fuzzBytes) floats(n int) []float32 {
	out := make([]float32, n)
	for i := range out {
		switch b := r.byte(); b {
		case 255:
			out[i] = float32(math.NaN())
		case 254:
			out[i] = float32(math.Inf(1))
		default:
			out[i] = float32(int(b)-128) / 16
		}
	}
	return out
}

func (r *fuzzBytes) ints(n, lo, hi int) []int64 {
	out := make([]int64, n)
	for i := range out {
		out[i] = int64(r.small(lo, hi))
	}
	return out
}

// graphOps are the operators the generator draws from.
var graphOps = []string{"Add", "MatMul", "Relu", "Reshape", "Concat", "Transpose", "Gemm", "Conv",
	"Mul", "Sigmoid", "Softmax", "Flatten", "MaxPool", "BatchNormalization", "Expand", "Slice"}

// genGraph builds a random model from fuzz bytes: one input "x", random
// initializers, up to 12 nodes drawn from graphOps wired to earlier values
// (sometimes to later ones, which makes cycles, or to names nobody makes),
// random attributes, shapes that often do not fit.
func genGraph(r *fuzzBytes) (*loader.Model, *tensor.Tensor) {
	g := &loader.Graph{Name: "fuzz", Initializers: map[string]*tensor.Tensor{}, ValueInfo: map[string]loader.ValueInfo{}}
	xs := r.shape()
	n, _ := tensor.NumElements(xs)
	x := tensor.From(r.floats(n), xs...)
	g.Inputs = []loader.ValueInfo{{Name: "x", DType: tensor.Float32, Shape: xs, Symbols: make([]string, len(xs)), HasType: true, Kind: "tensor"}}
	values := []string{"x"}
	addInit := func(t *tensor.Tensor) string {
		name := fmt.Sprintf("w%d", len(g.InitOrder))
		g.Initializers[name] = t
		g.InitOrder = append(g.InitOrder, name)
		return name
	}
	floatInit := func() string {
		s := r.shape()
		n, _ := tensor.NumElements(s)
		return addInit(tensor.From(r.floats(n), s...))
	}
	intsInit := func(lo, hi int) string {
		k := r.intn(5)
		return addInit(tensor.From(r.ints(k, lo, hi), k))
	}
	nodes := r.small(1, 12)
	pick := func(i int) string {
		switch r.intn(16) {
		case 0: // a later node's output: a cycle or a forward reference
			return fmt.Sprintf("v%d", i+r.small(0, 2))
		case 1:
			return floatInit()
		case 2:
			return "nobody"
		}
		return values[len(values)-1-r.intn(len(values))]
	}
	ia := func(name string, v ...int64) *loader.Attr {
		return &loader.Attr{Name: name, Kind: loader.AttrInts, Ints: v}
	}
	in := func(name string, v int64) *loader.Attr { return &loader.Attr{Name: name, Kind: loader.AttrInt, I: v} }
	for i := range nodes {
		op := graphOps[r.intn(len(graphOps))]
		out := fmt.Sprintf("v%d", i)
		nd := &loader.Node{Name: fmt.Sprintf("n%d_%s", i, op), OpType: op, Outputs: []string{out}, Attrs: map[string]*loader.Attr{}}
		a := pick(i)
		switch op {
		case "Relu", "Sigmoid":
			nd.Inputs = []string{a}
		case "Add", "Mul", "MatMul":
			nd.Inputs = []string{a, pick(i)}
		case "Reshape":
			nd.Inputs = []string{a, intsInit(-1, 6)}
		case "Expand":
			nd.Inputs = []string{a, intsInit(1, 4)}
		case "Concat":
			nd.Inputs = []string{a, pick(i)}
			if r.intn(2) == 0 {
				nd.Inputs = append(nd.Inputs, pick(i))
			}
			nd.Attrs["axis"] = in("axis", int64(r.small(-5, 4)))
		case "Transpose":
			nd.Inputs = []string{a}
			if r.intn(3) != 0 {
				nd.Attrs["perm"] = ia("perm", r.ints(r.intn(5), -1, 4)...)
			}
		case "Gemm":
			nd.Inputs = []string{a, pick(i)}
			if r.intn(2) == 0 {
				nd.Inputs = append(nd.Inputs, pick(i))
			}
			nd.Attrs["transA"] = in("transA", int64(r.intn(2)))
			nd.Attrs["transB"] = in("transB", int64(r.intn(2)))
		case "Conv", "MaxPool":
			nd.Inputs = []string{a}
			if op == "Conv" {
				nd.Inputs = append(nd.Inputs, pick(i))
				if r.intn(2) == 0 {
					nd.Inputs = append(nd.Inputs, pick(i))
				}
				if r.intn(2) == 0 {
					nd.Attrs["group"] = in("group", int64(r.small(0, 3)))
				}
			}
			k := r.intn(3)
			if r.intn(4) != 0 || op == "MaxPool" {
				nd.Attrs["kernel_shape"] = ia("kernel_shape", r.ints(k, 0, 3)...)
			}
			if r.intn(2) == 0 {
				nd.Attrs["pads"] = ia("pads", r.ints(2*k, -1, 2)...)
			}
			if r.intn(2) == 0 {
				nd.Attrs["strides"] = ia("strides", r.ints(k, 0, 3)...)
			}
			if r.intn(2) == 0 {
				nd.Attrs["dilations"] = ia("dilations", r.ints(k, 0, 2)...)
			}
			if r.intn(4) == 0 {
				nd.Attrs["auto_pad"] = &loader.Attr{Name: "auto_pad", Kind: loader.AttrString, S: []string{"SAME_UPPER", "SAME_LOWER", "VALID", "bogus"}[r.intn(4)]}
			}
		case "Softmax", "Flatten":
			nd.Inputs = []string{a}
			nd.Attrs["axis"] = in("axis", int64(r.small(-5, 4)))
		case "BatchNormalization":
			nd.Inputs = []string{a, pick(i), pick(i), pick(i), pick(i)}
		case "Slice":
			nd.Inputs = []string{a, intsInit(-5, 5), intsInit(-5, 5)}
			if r.intn(2) == 0 {
				nd.Inputs = append(nd.Inputs, intsInit(-4, 3), intsInit(-2, 2))
			}
		}
		g.Nodes = append(g.Nodes, nd)
		values = append(values, out)
	}
	// outputs: the last value, sometimes another one too
	g.Outputs = []loader.ValueInfo{{Name: values[len(values)-1]}}
	if r.intn(3) == 0 {
		g.Outputs = append(g.Outputs, loader.ValueInfo{Name: values[r.intn(len(values))]})
	}
	return &loader.Model{Opsets: map[string]int64{"": int64(r.small(7, 21))}, Graph: g}, x
}

// FuzzGraph: on random graphs Compile and Run return errors, never panic; no
// kernel panics (a recovered panic surfaces as "internal error"); every
// output a kernel hands the hook matches its dtype and shape.
func FuzzGraph(f *testing.F) {
	f.Add([]byte{})
	f.Add([]byte{2, 3, 4, 0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16, 17, 18, 19, 20, 21, 22, 23, 24})
	f.Add([]byte("\x02\x02\x03\x10\x20\x30\x40\x50\x60\x05\x06\x07\x08\x00\x01\x02\x03"))
	f.Add([]byte("\x04\x01\x02\x03\x03" + strings.Repeat("\x11\x42\x07\x99\x03\x01", 20)))
	for op := range graphOps {
		// one node of each operator on a [2 3] input
		f.Add([]byte{2, 2, 3, 1, 2, 3, 4, 5, 6, 0, byte(op), 3, 3, 2, 1, 1, 0, 2, 1, 2, 3, 4, 5, 6, 7, 8})
	}
	prev := tensor.SetMemoryBudget(16 << 20)
	f.Cleanup(func() { tensor.SetMemoryBudget(prev) })
	f.Fuzz(func(t *testing.T, b []byte) {
		m, x := genGraph(&fuzzBytes{b: b})
		p, err := Compile(m)
		if err != nil {
			return
		}
		hook := func(n *loader.Node, outs []*tensor.Tensor) error {
			for i, o := range outs {
				if o == nil {
					continue
				}
				if tensor.DTypeOf(o.Data) != o.DType || sliceLen(o.Data) != o.Size() {
					t.Fatalf("node %q output %d: %v holds %T of %d elements", n.Name, i, o, o.Data, sliceLen(o.Data))
				}
			}
			return nil
		}
		_, err = p.Run(map[string]*tensor.Tensor{"x": x}, hook)
		if err != nil && strings.Contains(err.Error(), "internal error") {
			t.Fatalf("kernel panic: %v", err)
		}
	})
}

// sliceLen is the length of a tensor's typed data slice (-1 for an unknown type).
func sliceLen(data any) int {
	switch d := data.(type) {
	case []float32:
		return len(d)
	case []float64:
		return len(d)
	case []int64:
		return len(d)
	case []int32:
		return len(d)
	case []int16:
		return len(d)
	case []int8:
		return len(d)
	case []uint8:
		return len(d)
	case []uint16:
		return len(d)
	case []uint32:
		return len(d)
	case []uint64:
		return len(d)
	case []bool:
		return len(d)
	case []string:
		return len(d)
	}
	return -1
}
