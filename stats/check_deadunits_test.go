package stats

import (
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// dead-units grades against its thresholds (defaults 25% / 50%, "common
// practice" in design.md) and follows --config overrides.
func TestDeadUnitsThresholds(t *testing.T) {
	mk := func() *Collected {
		r := &report.Report{Input: report.Input{Samples: 500}, Layers: []report.Layer{
			reluLayer("below", 0.24, 100), reluLayer("warn", 0.25, 100), reluLayer("err", 0.5, 100)}}
		return &Collected{Report: r, LayerKind: []ActKind{ActReLU, ActReLU, ActReLU}}
	}
	got := map[string]report.Severity{}
	for _, f := range checkOn(t, deadUnitsCheck, mk(), nil) {
		got[f.Node] = f.Severity
	}
	if len(got) != 2 || got["warn"] != report.Warning || got["err"] != report.Error {
		t.Fatalf("defaults: %v", got)
	}
	fs := checkOn(t, deadUnitsCheck, mk(), map[string]float64{"dead-units.warning": 0.6, "dead-units.error": 0.9})
	if len(fs) != 0 {
		t.Fatalf("raised thresholds still report %v", fs)
	}
	// few samples: never more than a warning, and the message says why
	col := mk()
	col.Report.Input.Samples = 5
	for _, f := range checkOn(t, deadUnitsCheck, col, nil) {
		if f.Severity != report.Warning || !strings.Contains(f.Message, "Only 5 samples") {
			t.Fatalf("5 samples: %v %q", f.Severity, f.Message)
		}
	}
}

// The dead count "at half the sample" is taken after the batch that
// completes half the rows AddInputs saw, not half the batches: 64+16+16+16+16
// rows reach half (64) after the first batch.
func TestHalfBatchBySamples(t *testing.T) {
	c := &Collector{batchRows: []int{64, 16, 16, 16, 16}}
	if h := c.halfBatch(5); h != 0 {
		t.Errorf("half after batch %d, want 0", h)
	}
	c.batchRows = []int{16, 16, 16, 16}
	if h := c.halfBatch(4); h != 1 {
		t.Errorf("equal batches: half after batch %d, want 1", h)
	}
	c.batchRows = []int{10, 100}
	if h := c.halfBatch(2); h != 0 {
		t.Errorf("half reached in the last batch: %d, want 0 (a second half must remain)", h)
	}
	if h := c.halfBatch(1); h != -1 {
		t.Errorf("one batch: %d, want -1", h)
	}
}
