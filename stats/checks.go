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
	prior      *[]report.Finding // the findings of the checks that ran before
}

// Prior is the findings of the checks that ran before this one, in place:
// a check may add to their evidence and message (weight-scale names a
// likely cause, regression marks new/worse/unchanged) but not remove them.
func (p *Pass) Prior() []report.Finding {
	if p.prior == nil {
		return nil
	}
	return *p.prior
}

// TOf returns another check's threshold "<check>.<param>" (the thresholds
// of the checks that ran, merged with the defaults).
func (p *Pass) TOf(check, param string) float64 { return p.Thresholds[check+"."+param] }

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
var Checks = []*Check{nonfiniteCheck, deadUnitsCheck, saturationCheck, gateConstantCheck, spreadCollapseCheck, spreadExplosionCheck,
	weightScaleCheck, symmetricUnitsCheck, batchnormDriftCheck, inputScaleCheck, outputHealthCheck, quantRangeCheck, float16RangeCheck,
	attentionCollapseCheck, attentionUniformCheck, massiveActivationsCheck, outlierFeaturesCheck, tokenSimilarityCheck,
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

// HelpLine is the first sentence of a doc: up to the first ". " that does
// not end an abbreviation ("et al.", "e.g.", "i.e.", "cf.", "vs."); the
// help, the report's "how to read this" and docs/checks.md print it whole.
func HelpLine(doc string) string {
	for i := 0; i < len(doc); i++ {
		if doc[i] != '.' || (i+1 < len(doc) && doc[i+1] != ' ') {
			continue
		}
		word := doc[:i]
		if j := strings.LastIndexAny(word, " ("); j >= 0 {
			word = word[j+1:]
		}
		switch word {
		case "al", "e.g", "i.e", "cf", "vs", "eq", "Eq":
			continue
		}
		return doc[:i+1]
	}
	return doc
}

// DocRest is the doc after its first sentence.
func DocRest(doc string) string {
	return strings.TrimSpace(strings.TrimPrefix(doc, HelpLine(doc)))
}

// Docs lists the checks' names with their summary and the rest of their
// doc, for the report's "how to read this".
func Docs(checks []*Check) []report.CheckDoc {
	out := make([]report.CheckDoc, 0, len(checks))
	for _, c := range checks {
		out = append(out, report.CheckDoc{Name: c.Name, Summary: HelpLine(c.Doc), Detail: DocRest(c.Doc)})
	}
	return out
}

// ValidateThresholds rejects a threshold no check in Checks (or in extra,
// e.g. compare's checks) knows, naming the known ones, or a value that is
// not finite; call it before any batch runs.
func ValidateThresholds(th map[string]float64, extra ...*Check) error {
	known := DefaultThresholds()
	for _, c := range extra {
		for k, v := range c.Defaults {
			known[k] = v
		}
	}
	return validateAgainst(th, known)
}

// Run applies the checks with the given thresholds (nil: defaults), fills
// Findings (ordered by ranking) and Ranking of col.Report.
func Run(col *Collected, checks []*Check, thresholds map[string]float64) error {
	if err := Validate(checks); err != nil {
		return err
	}
	th := DefaultThresholds()
	for _, c := range append(CompareChecks, checks...) { // a list other than Checks (tests, compare) brings its own defaults
		for k, v := range c.Defaults {
			th[k] = v
		}
	}
	if err := validateAgainst(thresholds, th); err != nil {
		return err
	}
	for k, v := range thresholds {
		th[k] = v
	}
	var all []report.Finding
	for _, c := range checks {
		p := &Pass{Collected: col, check: c, Thresholds: th, prior: &all}
		c.Run(p)
		all = append(all, p.findings...)
	}
	r := col.Report
	r.Thresholds = th
	r.Checks = Docs(checks)
	r.Ranking, r.Findings = rank(r, all)
	return nil
}

func validateAgainst(th, known map[string]float64) error {
	for _, k := range sortedKeys(th) {
		if _, ok := known[k]; !ok {
			return fmt.Errorf("unknown threshold %q (known: %s)", k, strings.Join(sortedKeys(known), ", "))
		}
		if v := th[k]; math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("threshold %q: %v is not a finite number", k, v)
		}
	}
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
// (strength = how far past its threshold, compressed by Emit to 1..8; compare's
// regression findings add 1) and orders findings by that rank.
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

// CompareChecks are the checks `vitals compare` adds, judging NEW against
// OLD (see compare.go); their thresholds are valid in --config like the others'.
var CompareChecks = []*Check{regressionCheck, frozenLayerCheck, outOfProportionCheck, quantNoiseCheck}
