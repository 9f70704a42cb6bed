package grad

import (
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

// TestLossGradients: the loss seeds against central differences of the
// loss values (step and tolerance as in fd_test.go), for cross-entropy of
// logits, of probabilities, and the squared error; and cross-entropy of
// logits against log-sum-exp computed directly (NumPy-style formula).
func TestLossGradients(t *testing.T) {
	r := rand.New(rand.NewSource(2))
	logits := rnd(r, 4, 5)
	labels := []int64{0, 4, 2, 2}
	probs := tensor.From(make([]float64, 20), 4, 5)
	for n := 0; n < 4; n++ {
		s := 0.0
		for k := 0; k < 5; k++ {
			s += math.Exp(logits.F64()[n*5+k])
		}
		for k := 0; k < 5; k++ {
			probs.F64()[n*5+k] = math.Exp(logits.F64()[n*5+k]) / s
		}
	}
	target := F64(rnd(r, 20))
	want := 0.0
	for n, l := range labels {
		s := 0.0
		for k := 0; k < 5; k++ {
			s += math.Exp(logits.F64()[n*5+k])
		}
		want += math.Log(s) - logits.F64()[n*5+int(l)]
	}
	if got, _, _ := CrossEntropy(logits, labels, false); math.Abs(got-want) > 1e-12*want {
		t.Errorf("cross-entropy %.15g, log-sum-exp %.15g", got, want)
	}
	for _, c := range []struct {
		name string
		x    *tensor.Tensor
		f    func(x *tensor.Tensor) (float64, []float64, error)
	}{
		{"ce-logits", logits, func(x *tensor.Tensor) (float64, []float64, error) { return CrossEntropy(x, labels, false) }},
		{"ce-probs", probs, func(x *tensor.Tensor) (float64, []float64, error) { return CrossEntropy(x, labels, true) }},
		{"mse", logits, func(x *tensor.Tensor) (float64, []float64, error) { return SquaredError(x, target) }},
	} {
		_, g, err := c.f(c.x)
		if err != nil {
			t.Fatal(err)
		}
		for k := range c.x.F64() {
			xp := c.x.Clone()
			v := xp.F64()[k]
			xp.F64()[k] = v + fdStep
			lp, _, _ := c.f(xp)
			xp.F64()[k] = v - fdStep
			lm, _, _ := c.f(xp)
			fd := (lp - lm) / (2 * fdStep)
			if math.Abs(g[k]-fd) > 1e-6*(1+math.Abs(fd)) {
				t.Errorf("%s: gradient[%d] %.9g, central difference %.9g", c.name, k, g[k], fd)
			}
		}
	}
	if IsDistribution(logits) || !IsDistribution(probs) {
		t.Error("IsDistribution wrong")
	}
	if _, _, err := CrossEntropy(logits, []int64{0, 9, 0, 0}, false); err == nil {
		t.Error("label 9 of 5 classes accepted")
	}
}
