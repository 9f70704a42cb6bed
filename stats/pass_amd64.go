package stats

import "golang.org/x/sys/cpu"

// passAVX512 is passGo for len(x) a multiple of 16 (pass_amd64.s); tabs may
// be nil when p.noHist.
//
//go:noescape
func passAVX512(x []float32, p *passParams, tabs *uint32, l *passLanes)

// passAVX2 is passAVX512 with AVX2 and FMA (pass_avx2_amd64.s).
//
//go:noescape
func passAVX2(x []float32, p *passParams, tabs *uint32, l *passLanes)

// Vector kernel levels.
const (
	passNone        = iota
	passLevelAVX2   // AVX2 and FMA
	passLevelAVX512 // AVX-512
)

// passLevel is the best kernel the CPU runs (tests lower it to try the others).
var passLevel = bestPassLevel()

func bestPassLevel() int {
	switch {
	case cpu.X86.HasAVX512F && cpu.X86.HasPOPCNT:
		return passLevelAVX512
	case cpu.X86.HasAVX2 && cpu.X86.HasFMA:
		return passLevelAVX2
	}
	return passNone
}

// passVec runs the vector kernel over x (len(x) a multiple of 16); false
// when the CPU has none (the caller runs passGo).
func passVec(x []float32, p *passParams, tabs []uint32, l *passLanes) bool {
	var t *uint32
	if !p.noHist {
		t = &tabs[:histTables*histStride][0]
	}
	switch passLevel {
	case passLevelAVX512:
		q := *p
		q.binF32()
		passAVX512(x, &q, t, l)
	case passLevelAVX2:
		passAVX2(x, p, t, l)
	default:
		return false
	}
	return true
}
