package stats

import (
	"testing"

	"github.com/vitals-health/vitals/report"
)

// Trained running statistics that disagree with the sample: one warning on
// the first drifting layer naming the later ones (one line per problem);
// initial 0/1 statistics are an error on each layer; on synthetic input a
// drift of trained statistics is information (Ioffe & Szegedy 2015: the
// running statistics are the training population's, which noise is not).
func TestBatchNormDriftOneLine(t *testing.T) {
	bn := func(node string, initial bool) BNStat {
		return BNStat{Node: node, Channels: 4, MeanShift: []float64{5, 5, 5, 5}, VarRatio: []float64{1, 1, 1, 1}, Initial: initial}
	}
	mk := func(source string, bns ...BNStat) []report.Finding {
		col := &Collected{Report: &report.Report{Input: report.Input{Source: source, Samples: 64}}, BatchNorms: bns}
		return checkOn(t, batchnormDriftCheck, col, nil)
	}
	fs := mk("file", bn("bn1", false), bn("bn2", false), bn("bn3", false))
	if len(fs) != 1 || fs[0].Node != "bn1" || fs[0].Severity != report.Warning || len(fs[0].Evidence["also"].([]string)) != 2 {
		t.Fatalf("trained statistics: %+v, want one warning on bn1 naming 2 more", fs)
	}
	fs = mk("file", bn("bn1", true), bn("bn2", true))
	if len(fs) != 2 || fs[0].Severity != report.Error || fs[1].Severity != report.Error {
		t.Fatalf("initial statistics: %+v, want an error on each", fs)
	}
	fs = mk("synthetic", bn("bn1", false))
	if len(fs) != 1 || fs[0].Severity != report.Info {
		t.Fatalf("synthetic input: %+v, want information", fs)
	}
}
