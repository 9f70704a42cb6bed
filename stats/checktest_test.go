package stats

import (
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// checkOn runs one check over hand-made statistics with the given threshold
// overrides and returns its findings (a checktest-style helper: the
// expectations sit next to the fixture).
func checkOn(t *testing.T, c *Check, col *Collected, overrides map[string]float64) []report.Finding {
	t.Helper()
	if err := Run(col, []*Check{c}, overrides); err != nil {
		t.Fatal(err)
	}
	return col.Report.Findings
}

func reluLayer(node string, dead float64, units int) report.Layer {
	return report.Layer{Node: node, Op: "Relu", Count: 1000, Units: report.IntPtr(units), UnitAxis: report.IntPtr(1),
		DeadFraction: report.Num(dead), Activation: "relu", Mean: report.Num(0.5), Std: report.Num(1)}
}

// Unknown threshold names are refused, naming the known ones.
func TestUnknownThreshold(t *testing.T) {
	col := &Collected{Report: &report.Report{}}
	err := Run(col, Checks, map[string]float64{"dead-unit.warning": 0.3})
	if err == nil || !strings.Contains(err.Error(), `"dead-unit.warning"`) || !strings.Contains(err.Error(), "dead-units.warning") {
		t.Fatalf("got %v", err)
	}
}

// Each check's summary is a whole sentence: parentheses closed, not cut at
// an abbreviation such as "et al.", and the report carries it with the rest
// of the doc for "how to read this".
func TestCheckSummariesWhole(t *testing.T) {
	if got := HelpLine("Gain against He et al. 2015 (e.g. for ReLU). More."); got != "Gain against He et al. 2015 (e.g. for ReLU)." {
		t.Errorf("HelpLine cut at an abbreviation: %q", got)
	}
	col := &Collected{Report: &report.Report{}}
	if err := Run(col, Checks, nil); err != nil {
		t.Fatal(err)
	}
	if len(col.Report.Checks) != len(Checks) {
		t.Fatalf("report carries %d check docs, want %d", len(col.Report.Checks), len(Checks))
	}
	for i, c := range Checks {
		s := HelpLine(c.Doc)
		if !strings.HasSuffix(s, ".") || strings.Count(s, "(") != strings.Count(s, ")") || len(s) < 20 {
			t.Errorf("%s: summary %q is not a whole sentence", c.Name, s)
		}
		d := col.Report.Checks[i]
		if d.Name != c.Name || d.Summary != s || strings.TrimSpace(d.Summary+" "+d.Detail) != strings.TrimSpace(c.Doc) {
			t.Errorf("%s: report doc %+v does not match the check's Doc", c.Name, d)
		}
	}
}

// ValidateThresholds names an unknown threshold and the known ones, and
// refuses a non-finite value.
func TestValidateThresholds(t *testing.T) {
	if err := ValidateThresholds(map[string]float64{"dead-units.warning": 0.3}); err != nil {
		t.Fatal(err)
	}
	err := ValidateThresholds(map[string]float64{"saturaton.warning": 0.3})
	if err == nil || !strings.Contains(err.Error(), `"saturaton.warning"`) || !strings.Contains(err.Error(), "saturation.warning") {
		t.Fatalf("got %v", err)
	}
}
