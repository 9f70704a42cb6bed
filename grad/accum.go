package grad

import (
	"math"
	"sort"
)

// Accumulator sums the gradients of the per-sample losses over the batches
// of a sample. With L the mean loss over all N samples:
//
//	dL/dW = (1/N) Σ_batches dL_batch/dW           (L_batch: the summed loss)
//	grad_rms(v) = √(Σ (dL/dv)² / count(v))        over every element of v in
//	                                               every batch, dL/dv = dL_batch/dv / N
type Accumulator struct {
	Samples int
	LossSum float64
	params  map[string][]float64
	sq      map[string]float64
	count   map[string]int64
	step    map[string]int
	missing map[string]map[string]bool
}

// NewAccumulator starts an empty sum.
func NewAccumulator() *Accumulator {
	return &Accumulator{params: map[string][]float64{}, sq: map[string]float64{}, count: map[string]int64{}, step: map[string]int{}, missing: map[string]map[string]bool{}}
}

// Add runs the backward pass of one batch of k samples whose summed loss is
// loss, seeded with the loss's gradient at the graph output, and adds it.
func (a *Accumulator) Add(t *Tape, output string, loss float64, seed []float64, k int) error {
	res, err := t.BackwardSq(map[string][]float64{output: seed}, func(step int, name string, n int, sq float64) {
		a.sq[name] += sq
		a.count[name] += int64(n)
		a.step[name] = step
	})
	if err != nil {
		return err
	}
	a.Samples += k
	a.LossSum += loss
	for name, g := range res.Params {
		if acc, ok := a.params[name]; ok && len(acc) == len(g) {
			for i, v := range g {
				acc[i] += v
			}
			t.free.put(g) // the next batch's gradients reuse it
		} else {
			a.params[name] = g
		}
	}
	for op, nodes := range res.Missing {
		if a.missing[op] == nil {
			a.missing[op] = map[string]bool{}
		}
		for _, n := range nodes {
			a.missing[op][n] = true
		}
	}
	return nil
}

// Param is dL/dW of an initializer (nil when no gradient reached it).
func (a *Accumulator) Param(name string) []float64 {
	g, ok := a.params[name]
	if !ok || a.Samples == 0 {
		return nil
	}
	out := make([]float64, len(g))
	for i, v := range g {
		out[i] = v / float64(a.Samples)
	}
	return out
}

// ParamNorm is the Frobenius norm of dL/dW, and whether a gradient reached W.
func (a *Accumulator) ParamNorm(name string) (float64, bool) {
	g, ok := a.params[name]
	if !ok || a.Samples == 0 {
		return 0, false
	}
	s := 0.0
	for _, v := range g {
		s += v * v
	}
	return math.Sqrt(s) / float64(a.Samples), true
}

// RMS is the root mean square of dL/dv over every element of value v, and
// whether a gradient reached v.
func (a *Accumulator) RMS(name string) (float64, bool) {
	c := a.count[name]
	if c == 0 || a.Samples == 0 {
		return 0, false
	}
	return math.Sqrt(a.sq[name]/float64(c)) / float64(a.Samples), true
}

// Loss is the mean loss over the sample.
func (a *Accumulator) Loss() float64 {
	if a.Samples == 0 {
		return math.NaN()
	}
	return a.LossSum / float64(a.Samples)
}

// Missing lists, by operator type, the nodes without a VJP that a gradient
// reached in some batch (sorted).
func (a *Accumulator) Missing() map[string][]string {
	out := map[string][]string{}
	for op, set := range a.missing {
		for n := range set {
			out[op] = append(out[op], n)
		}
		sort.Strings(out[op])
	}
	return out
}

// sumSq is Σ v² in four independent addition chains (elements i ≡ 0, 1,
// 2, 3 mod 4), added at the end: a single chain waits on the adder's
// latency at every element.
func sumSq(g []float64) float64 {
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(g); i += 4 {
		v := g[i : i+4 : i+4]
		s0 += v[0] * v[0]
		s1 += v[1] * v[1]
		s2 += v[2] * v[2]
		s3 += v[3] * v[3]
	}
	for ; i < len(g); i++ {
		s0 += g[i] * g[i]
	}
	return (s0 + s1) + (s2 + s3)
}
