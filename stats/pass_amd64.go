package stats

import "golang.org/x/sys/cpu"

// passAVX512 is passGo for len(x) a multiple of 16 (pass_amd64.s); tabs may
// be nil when p.noHist.
//
//go:noescape
func passAVX512(x []float32, p *passParams, tabs *uint32, l *passLanes)

var havePassAVX512 = cpu.X86.HasAVX512F

// passVec runs the vector kernel over x (len(x) a multiple of 16); false
// when the CPU has none (the caller runs passGo).
func passVec(x []float32, p *passParams, tabs []uint32, l *passLanes) bool {
	if !havePassAVX512 {
		return false
	}
	var t *uint32
	if !p.noHist {
		t = &tabs[:histTables*histStride][0]
	}
	passAVX512(x, p, t, l)
	return true
}
