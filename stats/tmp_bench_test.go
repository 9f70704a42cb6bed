package stats

import (
	"math"
	"testing"
)

func BenchmarkTmpNoHistOneCore(b *testing.B) {
	p := passParams{noHist: true, lo: -32, inv: 2, satLo: float32(math.Inf(-1)), satHi: 6}
	benchStats(b, func(x []float32) {
		for o := 0; o < len(x); o += fastChunk {
			chunkPass(x[o:min(len(x), o+fastChunk)], p, nil)
		}
	})
}

func BenchmarkTmpUniform(b *testing.B) {
	p := passParams{lo: -32, inv: 2, satLo: float32(math.Inf(-1)), satHi: 6}
	x := make([]float32, 1<<16)
	for i := range x {
		x[i] = float32((i*7919)%128)/2 - 32
	}
	tabs := make([]uint32, histTables*histStride)
	b.SetBytes(4 << 16)
	for b.Loop() {
		for o := 0; o < len(x); o += fastChunk {
			chunkPass(x[o:min(len(x), o+fastChunk)], p, tabs)
		}
	}
}
func BenchmarkTmpConst(b *testing.B) {
	p := passParams{lo: -32, inv: 2, satLo: float32(math.Inf(-1)), satHi: 6}
	x := make([]float32, 1<<16)
	tabs := make([]uint32, histTables*histStride)
	b.SetBytes(4 << 16)
	for b.Loop() {
		for o := 0; o < len(x); o += fastChunk {
			chunkPass(x[o:min(len(x), o+fastChunk)], p, tabs)
		}
	}
}
