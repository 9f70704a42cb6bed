package stats

import (
	"math/rand/v2"
	"testing"

	"vitals/tensor"
)

func BenchmarkObserveTiny(b *testing.B) {
	c := &Collector{perChanWanted: map[string]bool{}}
	x := fastData(rand.New(rand.NewPCG(3, 4)), 80, 0, false)
	la := &layerAcc{mom: NewMoments()}
	t := tensor.From(x, 8, 10)
	c.observe(la, t)
	for b.Loop() {
		c.observe(la, t)
	}
}
