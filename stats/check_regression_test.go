package stats

import (
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// compareFixture is OLD and NEW over the same four layers a..d, with OLD's
// findings (a: warning, c: warning) and NEW's (a: error, b: warning, c:
// warning), d's dead share 5% → 20% (under dead-units' 25% line), and five
// weights of which one barely moved and one moved 50× the median.
func compareFixture() (*Collected, *Collected, map[int]int, []float64) {
	layers := func() []report.Layer {
		var ls []report.Layer
		for _, n := range []string{"a", "b", "c", "d"} {
			ls = append(ls, report.Layer{Node: n, Op: "Relu"})
		}
		return ls
	}
	f := func(check, node string, sev report.Severity) report.Finding {
		return report.Finding{Check: check, Node: node, Severity: sev, Message: check + " on " + node, Evidence: map[string]any{}, Strength: 1}
	}
	or := &report.Report{Layers: layers(), Findings: []report.Finding{f("dead-units", "a", report.Warning), f("saturation", "c", report.Warning)}}
	nr := &report.Report{Layers: layers(), Findings: []report.Finding{f("dead-units", "a", report.Error), f("dead-units", "b", report.Warning), f("saturation", "c", report.Warning)},
		Thresholds: DefaultThresholds()}
	nr.Compare = &report.Comparison{Layers: []report.LayerDelta{{Node: "d", DeadOld: report.Num(0.05), DeadNew: report.Num(0.2)}}}
	changes := []float64{0.1, 0.1, 0.1, 1e-5, 5}
	for i, c := range changes {
		nr.Compare.Weights = append(nr.Compare.Weights, report.WeightDelta{Name: string(rune('p' + i)), Node: string(rune('p' + i)), RelativeChange: report.Num(c)})
	}
	return &Collected{Report: or}, &Collected{Report: nr}, map[int]int{0: 0, 1: 1, 2: 2, 3: 3}, changes
}

// One line per problem, marked new, worse or unchanged against OLD; no
// second "regression" line repeating a finding; a dead share growing by
// 15 points under the check's own line is a regression warning (common
// practice threshold 10 points).
func TestCompareMarksOneLinePerProblem(t *testing.T) {
	oldCol, newCol, match, changes := compareFixture()
	compareFindings(oldCol, newCol, match, changes)
	got := map[string]string{}
	for _, f := range newCol.Report.Findings {
		if f.Check == "dead-units" || f.Check == "saturation" {
			got[f.Node], _ = f.Evidence["compare"].(string)
		}
	}
	if got["a"] != StatusWorse || got["b"] != StatusNew || got["c"] != StatusUnchanged {
		t.Fatalf("marks %v, want a worse, b new, c unchanged", got)
	}
	var reg []report.Finding
	for _, f := range newCol.Report.Findings {
		if f.Check == "regression" {
			reg = append(reg, f)
		}
	}
	if len(reg) != 1 || reg[0].Node != "d" || !strings.Contains(reg[0].Message, "5.0% in OLD to 20.0%") {
		t.Fatalf("regression findings %+v, want one on d", reg)
	}
	for _, f := range newCol.Report.Findings {
		if f.Node == "a" && f.Check == "dead-units" && !strings.HasPrefix(f.Message, "WORSE (OLD: warning)") {
			t.Errorf("a: %q", f.Message)
		}
	}
}

// frozen-layer and changed-out-of-proportion compare each weight's
// relative change with the median's (0.1 here): 1e-5 < 0.01× → frozen;
// 5 > 10× → out of proportion; thresholds follow --config.
func TestCompareWeightChecks(t *testing.T) {
	oldCol, newCol, match, changes := compareFixture()
	compareFindings(oldCol, newCol, match, changes)
	by := map[string]string{}
	for _, f := range newCol.Report.Findings {
		if f.Check == "frozen-layer" || f.Check == "changed-out-of-proportion" {
			by[f.Check] += f.Node
		}
	}
	if by["frozen-layer"] != "s" || by["changed-out-of-proportion"] != "t" {
		t.Fatalf("weight findings %v, want frozen s and out-of-proportion t", by)
	}
	oldCol, newCol, match, changes = compareFixture()
	newCol.Report.Thresholds["changed-out-of-proportion.ratio"] = 100
	compareFindings(oldCol, newCol, match, changes)
	for _, f := range newCol.Report.Findings {
		if f.Check == "changed-out-of-proportion" {
			t.Fatalf("ratio 100 still reports %+v", f)
		}
	}
}
