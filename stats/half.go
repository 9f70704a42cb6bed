package stats

import (
	"math"
	"sort"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

// Half precision: vitals computes float16 models in float32 (the loader
// widens float16 weights), so it can say what running them in float16 would
// do to the values it observes. For every activation that is float16 in the
// model it counts, over the whole sample,
//
//	overflow:  finite |v| > 65504, the largest float16 (it becomes ±Inf)
//	subnormal: 0 < |v| < 2⁻¹⁴ ≈ 6.1035e-5, the smallest normal float16 (it
//	           keeps fewer than 11 significant bits, and below 2⁻²⁵ becomes 0)
//
// A tensor is float16 when the model declares it so (graph input or output,
// value_info), when a Cast to float16 produces it, or when its node reads a
// float16 tensor and no declaration says otherwise (nodes whose outputs are
// not floating point, such as Shape or ArgMax, are not counted: their
// outputs are not observed as activations).

// Float16Max is the largest finite float16; Float16MinNormal the smallest normal one (2⁻¹⁴).
const (
	Float16Max       = 65504.0
	Float16MinNormal = 6.103515625e-05
)

type halfAcc struct{ over, sub, n int64 }

// halfSet holds the float16 activations of a model and their counts.
type halfSet struct {
	acts    map[string]*halfAcc
	weights []string // initializers stored as float16, sorted
}

var nonFloatOut = map[string]bool{"Shape": true, "Size": true, "ArgMax": true, "ArgMin": true, "NonZero": true,
	"QuantizeLinear": true, "DynamicQuantizeLinear": true, "ConvInteger": true, "MatMulInteger": true}

func newHalfSet(g *loader.Graph, p *probe.Plan) *halfSet {
	hs := &halfSet{acts: map[string]*halfAcc{}}
	half := map[string]bool{}
	for name, dt := range g.Half {
		if dt == tensor.Float16 {
			half[name] = true
			hs.weights = append(hs.weights, name)
		}
	}
	sort.Strings(hs.weights)
	declared := func(name string) (tensor.DType, bool) {
		if vi, ok := g.ValueInfo[name]; ok && vi.HasType {
			return vi.DType, true
		}
		for _, vi := range g.Outputs {
			if vi.Name == name && vi.HasType {
				return vi.DType, true
			}
		}
		return 0, false
	}
	for _, in := range g.Inputs {
		if in.DType == tensor.Float16 {
			half[in.Name] = true
			hs.acts[in.Name] = &halfAcc{}
		}
	}
	for _, s := range p.Steps {
		n := s.Node
		if nonFloatOut[n.OpType] {
			continue
		}
		for i, o := range n.Outputs {
			if o == "" {
				continue
			}
			is := false
			if dt, ok := declared(o); ok {
				is = dt == tensor.Float16
			} else if n.OpType == "Cast" || n.OpType == "CastLike" {
				is = n.OpType == "Cast" && n.Attrs["to"] != nil && tensor.DType(n.Attrs["to"].I) == tensor.Float16
			} else if i == 0 {
				for _, in := range n.Inputs {
					is = is || half[in]
				}
			}
			if is {
				half[o] = true
				hs.acts[o] = &halfAcc{}
			}
		}
	}
	if len(hs.acts) == 0 && len(hs.weights) == 0 {
		return nil
	}
	return hs
}

func (hs *halfSet) observe(name string, t *tensor.Tensor) {
	if hs == nil || t == nil {
		return
	}
	a := hs.acts[name]
	if a == nil {
		return
	}
	x, ok := t.Data.([]float32)
	if !ok {
		return
	}
	for _, v := range x {
		m := math.Abs(float64(v))
		if m > Float16Max && !math.IsInf(m, 0) {
			a.over++
		} else if m > 0 && m < Float16MinNormal {
			a.sub++
		}
	}
	a.n += int64(len(x))
}

// result returns whether name is a float16 activation and its overflow and
// subnormal shares (NaN before any value).
func (hs *halfSet) result(name string) (isHalf bool, over, sub float64) {
	if hs == nil || hs.acts[name] == nil {
		return false, math.NaN(), math.NaN()
	}
	a := hs.acts[name]
	if a.n == 0 {
		return true, math.NaN(), math.NaN()
	}
	return true, float64(a.over) / float64(a.n), float64(a.sub) / float64(a.n)
}
