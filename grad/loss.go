package grad

import (
	"fmt"
	"math"

	"github.com/vitals-health/vitals/tensor"
)

// Losses. Each returns the summed per-sample loss of one batch and its
// gradient with respect to the output (of the sum: the caller divides by
// the sample count N, so that L is the mean over the whole sample).

// IsDistribution reports whether every row along the last axis of a class
// output is non-negative and sums to 1 within 1e-3 (the output is then
// taken as probabilities, otherwise as logits).
func IsDistribution(out *tensor.Tensor) bool {
	x := F64(out)
	C := out.Shape[out.Rank()-1]
	for r := 0; r+C <= len(x); r += C {
		s := 0.0
		for _, v := range x[r : r+C] {
			if v < 0 {
				return false
			}
			s += v
		}
		if math.Abs(s-1) >= 1e-3 {
			return false
		}
	}
	return true
}

// TopClass is the index of the largest value of every row (the model's own
// prediction, used as pseudo-label without labels).
func TopClass(out *tensor.Tensor) []int64 {
	x := F64(out)
	C := out.Shape[out.Rank()-1]
	labels := make([]int64, 0, len(x)/max(C, 1))
	for r := 0; r+C <= len(x); r += C {
		best := 0
		for k, v := range x[r : r+C] {
			if v > x[r+best] {
				best = k
			}
		}
		labels = append(labels, int64(best))
	}
	return labels
}

// CrossEntropy is Σ_n −log p[n, label_n] over the rows of a class output
// [N, C] (probabilities when IsDistribution, else logits with
// p = softmax(row)), and its gradient: softmax − one-hot for logits,
// −1/p at the label for probabilities (p floored at 1e-12).
func CrossEntropy(out *tensor.Tensor, labels []int64, probs bool) (float64, []float64, error) {
	if out.Rank() != 2 {
		return 0, nil, fmt.Errorf("cross-entropy needs a class output [samples, classes], got %v", out.Shape)
	}
	N, C := out.Shape[0], out.Shape[1]
	if len(labels) != N {
		return 0, nil, fmt.Errorf("%d labels for %d output rows", len(labels), N)
	}
	x := F64(out)
	g := make([]float64, len(x))
	sum := 0.0
	for n := 0; n < N; n++ {
		l := int(labels[n])
		if l < 0 || l >= C {
			return 0, nil, fmt.Errorf("label %d of sample %d is outside 0..%d", l, n, C-1)
		}
		row, gr := x[n*C:(n+1)*C], g[n*C:(n+1)*C]
		if probs {
			p := math.Max(row[l], 1e-12)
			sum -= math.Log(p)
			gr[l] = -1 / p
			continue
		}
		m := row[0]
		for _, v := range row {
			m = math.Max(m, v)
		}
		z := 0.0
		for k, v := range row {
			gr[k] = math.Exp(v - m)
			z += gr[k]
		}
		for k := range gr {
			gr[k] /= z
		}
		sum -= math.Log(math.Max(gr[l], 1e-300))
		gr[l]--
	}
	return sum, g, nil
}

// SquaredError is Σ_n mean_d (y − t)² over the rows of an output and its
// targets of the same shape, and its gradient 2(y − t)/D.
func SquaredError(out *tensor.Tensor, target []float64) (float64, []float64, error) {
	x := F64(out)
	if len(target) != len(x) {
		return 0, nil, fmt.Errorf("targets have %d values for an output of %d (%v)", len(target), len(x), out.Shape)
	}
	D := len(x)
	if out.Rank() > 0 && out.Shape[0] > 0 {
		D /= out.Shape[0]
	}
	g := make([]float64, len(x))
	sum := 0.0
	for i, v := range x {
		d := v - target[i]
		sum += d * d / float64(D)
		g[i] = 2 * d / float64(D)
	}
	return sum, g, nil
}
