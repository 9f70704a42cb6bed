package stats_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/report"
)

// A plain chain of 10 ReLU layers of 400 units: with Var[w] = 4/fan_in each
// layer doubles the second moment (He et al. 2015, eq. 10: factor ½·n·Var[w]),
// so over the 9 weights between the first and last activations the std grows
// by 2^4.5 ≈ 22.6 > 10 → a spread-explosion warning (under the 1e3 error
// line), and weight-scale names the compound gain as the likely cause. At
// He's Var[w] = 2/fan_in the spread holds and there is no finding.
func TestSpreadExplosionReLUChain(t *testing.T) {
	chain := func(rng *rand.Rand, varW float64) *modelbuild.Builder {
		const units = 400
		b := modelbuild.New("relu_up", 13)
		b.Input("x", []int{1, units}, true)
		in := "x"
		for l := 0; l < 10; l++ {
			s := string(rune('a' + l))
			initGaussian(b, rng, "W"+s, units, math.Sqrt(varW/units))
			r := b.Node("Relu", "relu"+s, []string{in}, []string{"r" + s})
			in = b.Node("MatMul", "fc"+s, []string{r, "W" + s}, []string{"y" + s})
		}
		b.Output(in)
		return b
	}
	rng := rand.New(rand.NewPCG(31, 1))
	fs := findings(analyze(t, chain(rng, 4), gaussian(rng, 1, 128, 400)), "spread-explosion", "")
	if len(fs) != 1 || fs[0].Node != "reluj" || fs[0].Severity != report.Warning {
		t.Fatalf("Var[w]=4/n: %+v, want one warning on reluj", fs)
	}
	if r := fs[0].Evidence["ratio"].(float64); r < 22.6/2 || r > 22.6*2 {
		t.Errorf("ratio %.3g, want within 2× of 2^4.5 = 22.6", r)
	}
	if fs[0].Evidence["likely_cause"] == nil {
		t.Errorf("no cause named: %+v", fs[0])
	}
	if fs := findings(analyze(t, chain(rng, 2), gaussian(rng, 1, 128, 400)), "spread-explosion", ""); len(fs) != 0 {
		t.Fatalf("He init: %+v, want none", fs)
	}
}
