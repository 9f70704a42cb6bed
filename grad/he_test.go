package grad

import (
	"fmt"
	"math"
	"math/rand"
	"testing"

	"github.com/vitals-health/vitals/internal/modelbuild"
	"github.com/vitals-health/vitals/internal/modeltest"
	"github.com/vitals-health/vitals/tensor"
)

// TestHeBackwardVariance reproduces the backward case of He et al. 2015
// ("Delving Deep into Rectifiers", §2.2, eq. 13–14): in a ReLU stack,
// Var[Δx_l] = ½·n̂_l·Var[w_l]·Var[Δx_{l+1}] with n̂_l the layer's fan-out, so
// Var[w] = 2/n̂ keeps the variance of the activation gradients layer to
// layer and Var[w] = 1/n̂ halves it per layer. Widths vary (fan-in ≠
// fan-out), so the forward condition 2/fan_in would not do. Over 9 ReLU
// layers the measured ratio Var[Δx_1]/Var[Δx_10] must be within a factor 2
// of the prediction, 1 and 2⁻⁹.
func TestHeBackwardVariance(t *testing.T) {
	widths := []int{256, 384, 256, 512, 320, 448, 256, 384, 512, 320, 256}
	for _, c := range []struct {
		gain float64 // Var[w] = gain/fan_out
		want float64
	}{{2, 1}, {1, math.Pow(2, -9)}} {
		t.Run(fmt.Sprintf("var=%g/fan_out", c.gain), func(t *testing.T) {
			r := rand.New(rand.NewSource(3))
			b := modelbuild.New("he", 13)
			b.Input("x", []int{1, widths[0]}, true)
			prev := "x"
			for l := 1; l < len(widths); l++ {
				in, out := widths[l-1], widths[l]
				w := make([]float32, out*in)
				sd := math.Sqrt(c.gain / float64(out))
				for i := range w {
					w[i] = float32(r.NormFloat64() * sd)
				}
				b.Init(fmt.Sprintf("w%d", l), []int{out, in}, w)
				y := fmt.Sprintf("z%d", l)
				b.Node("Gemm", fmt.Sprintf("fc%d", l), []string{prev, fmt.Sprintf("w%d", l)}, []string{y}, modelbuild.Attr{Name: "transB", Value: int64(1)})
				prev = y
				if l < len(widths)-1 {
					h := fmt.Sprintf("h%d", l)
					b.Node("Relu", fmt.Sprintf("relu%d", l), []string{y}, []string{h})
					prev = h
				}
			}
			b.Output(prev)
			m := modeltest.Model(t, b)
			N := 256
			x := make([]float32, N*widths[0])
			for i := range x {
				x[i] = float32(r.NormFloat64())
			}
			tape, out := runBatch(t, m, tensor.From(x, N, widths[0]))
			tape.InputGrads = true
			seed := make([]float64, out.Size())
			for i := range seed {
				seed[i] = r.NormFloat64()
			}
			top := fmt.Sprintf("h%d", len(widths)-2) // input of the last layer: Δx_10
			var topVar float64
			res, err := tape.Backward(map[string][]float64{m.Graph.Outputs[0].Name: seed}, func(_ int, name string, g []float64) {
				if name == top {
					topVar = meanSquare(g)
				}
			})
			if err != nil {
				t.Fatal(err)
			}
			got := meanSquare(res.Inputs["x"]) / topVar // Δx_1: input of the first layer
			if got < c.want/2 || got > c.want*2 {
				t.Errorf("Var[Δx_1]/Var[Δx_10] = %.4g, He et al. predict %.4g", got, c.want)
			}
			t.Logf("Var[Δx_1]/Var[Δx_10] = %.4g (prediction %.4g)", got, c.want)
		})
	}
}

func meanSquare(g []float64) float64 {
	s := 0.0
	for _, v := range g {
		s += v * v
	}
	return s / float64(len(g))
}
