package probe

import (
	"testing"
)

func BenchmarkSiLUBig(b *testing.B) {
	const plane = 112 * 112
	const planes = 8 * 96
	x := make([]float32, plane*planes)
	for i := range x {
		x[i] = float32(i%2000-1000) / 256
	}
	// several destination sets so the writes go beyond the caches
	var ds, ms [4][]float32
	for k := range ds {
		ds[k], ms[k] = make([]float32, len(x)), make([]float32, len(x))
		for i := range ds[k] {
			ds[k][i], ms[k][i] = 1, 1
		}
	}
	b.Run("copy", func(b *testing.B) {
		b.SetBytes(int64(4 * len(x)))
		k := 0
		for b.Loop() {
			copy(ds[k%4], x)
			copy(ms[k%4], x)
			k++
		}
	})
	b.Run("both", func(b *testing.B) {
		b.SetBytes(int64(4 * len(x)))
		k := 0
		for b.Loop() {
			d, m := ds[k%4], ms[k%4]
			k++
			for p := 0; p < planes; p++ {
				siluVec(d[p*plane:(p+1)*plane], m[p*plane:(p+1)*plane], x[p*plane:(p+1)*plane], false)
			}
		}
	})
	b.Run("samedst", func(b *testing.B) {
		b.SetBytes(int64(4 * len(x)))
		d, m := make([]float32, plane), make([]float32, plane)
		for b.Loop() {
			for p := 0; p < planes; p++ {
				siluVec(d, m, x[p*plane:(p+1)*plane], false)
			}
		}
	})
}
