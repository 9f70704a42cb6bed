package stats

import (
	"fmt"
	"math"
	"sort"
	"strings"

	"github.com/vitals-health/vitals/report"
)

// Check is one health check: a value with a name, a doc whose first sentence
// is its help line, default thresholds (keys "<name>.<param>"), and Run.
type Check struct {
	Name     string
	Doc      string
	Defaults map[string]float64
	Run      func(p *Pass)
}

// Pass is what a check's Run sees: the collected statistics, the thresholds
// in force, and Emit to report findings.
type Pass struct {
	*Collected
	check      *Check
	Thresholds map[string]float64
	findings   []report.Finding
}

// T returns the threshold "<check>.<param>".
func (p *Pass) T(param string) float64 { return p.Thresholds[p.check.Name+"."+param] }

// Emit reports a finding of the running check.
func (p *Pass) Emit(sev report.Severity, node string, strength float64, evidence map[string]any, format string, args ...any) {
	// strength is compressed logarithmically (1 + log₂ s, at most 8) so that
	// large excesses still order layers without one finding swamping the rest
	if math.IsNaN(strength) || strength < 1 {
		strength = 1
	}
	strength = math.Min(1+math.Log2(strength), 8)
	for k, v := range evidence {
		evidence[k] = plainValue(v)
	}
	p.findings = append(p.findings, report.Finding{Check: p.check.Name, Severity: sev, Node: node,
		Message: fmt.Sprintf(format, args...), Evidence: evidence, Strength: strength})
}

// Checks is the list of health checks, in the order they run.
var Checks = []*Check{nonfiniteCheck, deadUnitsCheck, saturationCheck, spreadCollapseCheck, spreadExplosionCheck,
	weightScaleCheck, symmetricUnitsCheck, batchnormDriftCheck, inputScaleCheck, outputHealthCheck,
	gradVanishingCheck, gradExplosionCheck, gradZeroCheck, updateRatioCheck}

// Validate rejects an undocumented or duplicate check, or thresholds not named after their check.
func Validate(checks []*Check) error {
	seen := map[string]bool{}
	for _, c := range checks {
		if c.Name == "" || c.Doc == "" || c.Run == nil {
			return fmt.Errorf("check %q: name, doc and run are required", c.Name)
		}
		if seen[c.Name] {
			return fmt.Errorf("check %q is listed twice", c.Name)
		}
		seen[c.Name] = true
		for k := range c.Defaults {
			if !strings.HasPrefix(k, c.Name+".") {
				return fmt.Errorf("check %q: threshold %q must start with %q", c.Name, k, c.Name+".")
			}
		}
	}
	return nil
}

// DefaultThresholds merges every check's defaults.
func DefaultThresholds() map[string]float64 {
	t := map[string]float64{}
	for _, c := range Checks {
		for k, v := range c.Defaults {
			t[k] = v
		}
	}
	return t
}

// HelpLine is the first sentence of a doc.
func HelpLine(doc string) string {
	if i := strings.Index(doc, ". "); i >= 0 {
		return doc[:i+1]
	}
	return doc
}

// Run applies the checks with the given thresholds (nil: defaults), fills
// Findings (ordered by ranking) and Ranking of col.Report.
func Run(col *Collected, checks []*Check, thresholds map[string]float64) error {
	if err := Validate(checks); err != nil {
		return err
	}
	th := DefaultThresholds()
	for k, v := range thresholds {
		if _, ok := th[k]; !ok {
			return fmt.Errorf("unknown threshold %q (known: %s)", k, strings.Join(sortedKeys(th), ", "))
		}
		th[k] = v
	}
	var all []report.Finding
	for _, c := range checks {
		p := &Pass{Collected: col, check: c, Thresholds: th}
		c.Run(p)
		all = append(all, p.findings...)
	}
	r := col.Report
	r.Thresholds = th
	r.Ranking, r.Findings = rank(r, all)
	return nil
}

func sortedKeys(m map[string]float64) []string {
	var ks []string
	for k := range m {
		ks = append(ks, k)
	}
	sort.Strings(ks)
	return ks
}

// severityWeight scores a finding: error 10, warning 3, info 0 (info never ranks a layer).
var severityWeight = map[report.Severity]float64{report.Error: 10, report.Warning: 3, report.Info: 0}

// rank scores each node by Σ weight(severity)·strength over its findings
// (strength = how far past its threshold, 1..5) and orders findings by that rank.
func rank(r *report.Report, fs []report.Finding) ([]report.Rank, []report.Finding) {
	depth := map[string]int{}
	for _, l := range r.Layers {
		if _, ok := depth[l.Node]; !ok {
			depth[l.Node] = l.Depth
		}
	}
	score := map[string]float64{}
	checks := map[string][]string{}
	for _, f := range fs {
		score[f.Node] += severityWeight[f.Severity] * f.Strength
		if !contains(checks[f.Node], f.Check) {
			checks[f.Node] = append(checks[f.Node], f.Check)
		}
	}
	var ranks []report.Rank
	for node, s := range score {
		if s > 0 {
			ranks = append(ranks, report.Rank{Node: node, Score: math.Round(s*100) / 100, Checks: checks[node]})
		}
	}
	sort.SliceStable(ranks, func(i, j int) bool {
		if ranks[i].Score != ranks[j].Score {
			return ranks[i].Score > ranks[j].Score
		}
		if depth[ranks[i].Node] != depth[ranks[j].Node] {
			return depth[ranks[i].Node] < depth[ranks[j].Node]
		}
		return ranks[i].Node < ranks[j].Node
	})
	pos := map[string]int{}
	for i, rk := range ranks {
		pos[rk.Node] = i
	}
	sort.SliceStable(fs, func(i, j int) bool {
		pi, oki := pos[fs[i].Node]
		pj, okj := pos[fs[j].Node]
		if oki != okj {
			return oki
		}
		if pi != pj {
			return pi < pj
		}
		return fs[i].Severity.Level() > fs[j].Severity.Level()
	})
	if ranks == nil {
		ranks = []report.Rank{}
	}
	if fs == nil {
		fs = []report.Finding{}
	}
	return ranks, fs
}

func contains(s []string, x string) bool {
	for _, v := range s {
		if v == x {
			return true
		}
	}
	return false
}

// plainValue dereferences optional numbers so evidence holds plain values
// (nil for unknown), which every writer prints as numbers.
func plainValue(v any) any {
	switch x := v.(type) {
	case *float64:
		if x == nil {
			return nil
		}
		return *x
	case *int:
		if x == nil {
			return nil
		}
		return *x
	}
	return v
}
