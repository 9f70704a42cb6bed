package loader

import (
	"fmt"
	"io"
	"math/rand/v2"

	"github.com/vitals-health/vitals/tensor"
)

// syntheticStream is the second PCG seed word, fixed so that a given seed
// always yields the same numbers.
const syntheticStream = 0x76697461_6c73_0001

// Synthetic returns n samples of the given per-sample shape whose float32
// elements are independent draws from the standard normal N(0, 1)
// (math/rand/v2 NormFloat64 on a PCG generator seeded with (seed, a fixed
// stream constant)). Values depend only on seed and on the element's position
// in the sequence of all samples, not on the batch sizes asked of Next.
// Every dimension of shape must be positive.
func Synthetic(shape []int, n int, seed int64) (Source, error) {
	if n < 0 {
		return nil, fmt.Errorf("synthetic input: sample count %d", n)
	}
	for _, d := range shape {
		if d <= 0 {
			return nil, fmt.Errorf("synthetic input: shape %v needs positive dimensions (resolve symbolic dimensions first)", shape)
		}
	}
	per, err := tensor.NumElements(shape)
	if err != nil {
		return nil, fmt.Errorf("synthetic input: %w", err)
	}
	return &syntheticSource{
		shape: append([]int{}, shape...), per: per, n: n, seed: seed,
		rng: rand.New(rand.NewPCG(uint64(seed), syntheticStream)),
	}, nil
}

type syntheticSource struct {
	shape []int
	per   int
	n     int
	pos   int
	seed  int64
	rng   *rand.Rand
}

func (s *syntheticSource) Name() string {
	return fmt.Sprintf("synthetic N(0,1) input, seed %d", s.seed)
}
func (s *syntheticSource) SampleShape() []int  { return append([]int{}, s.shape...) }
func (s *syntheticSource) DType() tensor.DType { return tensor.Float32 }
func (s *syntheticSource) Len() int            { return s.n }
func (s *syntheticSource) Close() error        { return nil }

func (s *syntheticSource) Next(n int) (*tensor.Tensor, error) {
	if n <= 0 {
		return nil, fmt.Errorf("%s: batch size %d", s.Name(), n)
	}
	if s.pos >= s.n {
		return nil, io.EOF
	}
	k := min(n, s.n-s.pos)
	if s.per > 0 && k > tensor.MaxElements/s.per {
		return nil, fmt.Errorf("%s: batch of %d samples is too large", s.Name(), k)
	}
	d := make([]float32, k*s.per)
	for i := range d {
		d[i] = float32(s.rng.NormFloat64())
	}
	s.pos += k
	return &tensor.Tensor{DType: tensor.Float32, Shape: append([]int{k}, s.shape...), Data: d}, nil
}
