package report

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
)

// review is the content shared by the Markdown and HTML review reports,
// already formatted as text (unknown values as "—").
type review struct {
	Synthetic  bool
	Errors     int
	Warnings   int
	Layers     int // distinct nodes with a warning or error
	About      string
	Findings   []reviewFinding
	Images     []reviewImage
	Output     []string
	LayerRows  []reviewLayer
	WeightRows []reviewWeight
	Compare    *reviewCompare
	HowTo      []reviewCheck
	Caution    string
	// Coverage, CoverageWarning and Gaps: coverage.go's wording.
	Coverage, CoverageWarning string
	Gaps                      []string
}

type reviewFinding struct {
	Rank                                     string
	Node, Severity, Check, Message, Evidence string
}

type reviewImage struct {
	File, Caption string
}

// reviewCell is a formatted value with its number for sorting (NaN if none).
type reviewCell struct {
	Text string
	Num  float64
}

type reviewLayer struct {
	Node, Op, Shape string
	Severity        string // worst finding on the node, "" if none
	Cells           []reviewCell
}

type reviewWeight struct {
	Name, Node, Shape string
	Cells             []reviewCell
}

type reviewCompare struct {
	Old, New string
	// Header names Layers' columns: reviewDeltaHeader, plus "SQNR dB" when
	// any matched layer has one (float against quantized or float16).
	Header    []string
	Layers    [][]string
	Weights   [][]string
	Agreement []string
	Unmatched []string
}

type reviewCheck struct {
	Name, Means, Do string
}

// reviewLayerHeader and reviewWeightHeader name the columns of the tables.
var (
	reviewLayerHeader  = []string{"node", "op", "shape", "mean", "std", "min", "max", "zero %", "dead %", "saturated %", "non-finite"}
	reviewWeightHeader = []string{"tensor", "node", "shape", "fan-in", "std", "gain std·√fan_in", "gain/√2 (He)", "gain/1 (Xavier)", "identical rows", "zero rows", "non-finite"}
	reviewDeltaHeader  = []string{"node (NEW)", "node (OLD)", "op", "mean OLD → NEW", "std OLD → NEW", "dead % OLD → NEW", "saturated % OLD → NEW", "histogram distance"}
)

// howTo is the "how to read this" list: each check that reported on this
// model (a finding of any severity), its doc's summary and the rest of its
// doc (the check's doc is the single source). Checks with nothing to say
// about this model are left out: docs/checks.md lists every one.
func howTo(docs []CheckDoc, findings []Finding) []reviewCheck {
	used := map[string]bool{}
	for _, f := range findings {
		used[f.Check] = true
	}
	out := make([]reviewCheck, 0, len(docs))
	for _, d := range docs {
		if used[d.Name] {
			out = append(out, reviewCheck{Name: d.Name, Means: d.Summary, Do: d.Detail})
		}
	}
	return out
}

// reviewFigureCaptions describe each figure by its file name prefix.
var reviewFigureCaptions = []struct{ prefix, caption string }{
	{"depth-profile", "Activation spread along depth"},
	{"unit-health", "Dead and saturated units per activation layer"},
	{"histograms-", "Per-layer activation histograms, worst-ranked first"},
	{"weights", "Weight gain against the Xavier and He references"},
	{"residual-stream", "Residual stream: max |x| over median |x| along depth"},
	{"attention-entropy", "Attention entropy per block and head (0 one-hot, 1 uniform)"},
	{"gradient-depth", "Gradient RMS and activation spread along depth (backward pass)"},
	{"update-ratio", "Predicted SGD update ratio per weight against the 1e-3 rule of thumb"},
	{"compare-histograms-", "OLD vs NEW histograms of the layers that changed most"},
	{"compare-depth-profile", "Activation std along depth, OLD vs NEW"},
	{"compare-sqnr", "SQNR of NEW against OLD along depth"},
}

// reviewImageOrder sorts figure names in the order WriteAll produces them.
func reviewImageOrder(names []string) []reviewImage {
	rank := func(n string) int {
		for i, c := range reviewFigureCaptions {
			if strings.HasPrefix(n, c.prefix) {
				return i
			}
		}
		return len(reviewFigureCaptions)
	}
	s := slices.Clone(names)
	slices.SortStableFunc(s, func(a, b string) int {
		return cmp.Or(cmp.Compare(rank(a), rank(b)), strings.Compare(a, b))
	})
	out := make([]reviewImage, len(s))
	for i, n := range s {
		out[i] = reviewImage{File: n, Caption: n}
		if k := rank(n); k < len(reviewFigureCaptions) {
			out[i].Caption = reviewFigureCaptions[k].caption
		}
	}
	return out
}

// buildReview formats r for the review writers.
func buildReview(r *Report, images []string) *review {
	rv := &review{Synthetic: r.Input.Source == "synthetic", Caution: Caution, HowTo: howTo(r.Checks, r.Findings),
		Coverage: CoverageLine(r), CoverageWarning: CoverageWarning(r), Gaps: CoverageGaps(r)}
	rv.Images = reviewImageOrder(images)
	rank := map[string]int{}
	for i, rk := range r.Ranking {
		if _, ok := rank[rk.Node]; !ok {
			rank[rk.Node] = i + 1
		}
	}
	worst := map[string]Severity{}
	fs := slices.Clone(r.Findings)
	slices.SortStableFunc(fs, func(a, b Finding) int {
		ra, rb := rank[a.Node], rank[b.Node]
		if ra == 0 {
			ra = math.MaxInt
		}
		if rb == 0 {
			rb = math.MaxInt
		}
		return cmp.Or(cmp.Compare(ra, rb), cmp.Compare(b.Severity.Level(), a.Severity.Level()))
	})
	rv.Errors, rv.Warnings, rv.Layers = verdictCounts(fs)
	for _, f := range fs {
		if w, ok := worst[f.Node]; !ok || f.Severity.Level() > w.Level() {
			worst[f.Node] = f.Severity
		}
		rf := reviewFinding{Rank: "—", Node: f.Node, Severity: string(f.Severity), Check: f.Check,
			Message: f.Message, Evidence: reviewEvidence(f.Evidence)}
		if k := rank[f.Node]; k > 0 {
			rf.Rank = strconv.Itoa(k)
		}
		rv.Findings = append(rv.Findings, rf)
	}
	rv.About = reviewAbout(r)
	rv.Output = reviewOutput(r.Output)
	layers := slices.Clone(r.Layers)
	slices.SortStableFunc(layers, func(a, b Layer) int { return cmp.Compare(a.Depth, b.Depth) })
	for _, l := range layers {
		row := reviewLayer{Node: l.Node, Op: l.Op, Shape: reviewShape(l.Shape)}
		if s, ok := worst[l.Node]; ok {
			row.Severity = string(s)
		}
		row.Cells = []reviewCell{numCell(l.Mean), numCell(l.Std), numCell(l.Min), numCell(l.Max),
			pctCell(l.ZeroFraction), pctCell(l.DeadFraction), pctCell(l.SaturatedFraction), intCell(l.Nonfinite)}
		rv.LayerRows = append(rv.LayerRows, row)
	}
	for _, w := range r.Weights {
		rv.WeightRows = append(rv.WeightRows, reviewWeight{Name: w.Name, Node: w.Node, Shape: reviewShape(w.Shape),
			Cells: []reviewCell{intCell(int64(w.FanIn)), numCell(w.Std), numCell(w.Gain), numCell(w.ScaleVsHe),
				numCell(w.ScaleVsXavier), intCell(int64(w.IdenticalRows)), intCell(int64(w.ZeroRows)), intCell(w.Nonfinite)}})
	}
	if r.Compare != nil {
		rv.Compare = reviewComparison(r.Compare)
	}
	return rv
}

// Verdict is the one-line summary, e.g. "2 errors, 3 warnings in 5 layers".
func (rv *review) Verdict() string { return verdictLine(rv.Errors, rv.Warnings, rv.Layers) }

// verdictCounts counts error and warning findings and the layers they fall on.
func verdictCounts(fs []Finding) (errors, warnings, layers int) {
	flagged := map[string]bool{}
	for _, f := range fs {
		switch f.Severity {
		case Error:
			errors++
		case Warning:
			warnings++
		default:
			continue
		}
		flagged[f.Node] = true
	}
	return errors, warnings, len(flagged)
}

// verdictLine words the counts, e.g. "2 errors, 3 warnings in 5 layers".
func verdictLine(errors, warnings, layers int) string {
	if errors+warnings == 0 {
		return "No findings at warning level or above"
	}
	return fmt.Sprintf("%s, %s in %s", plural(errors, "error"), plural(warnings, "warning"), plural(layers, "layer"))
}

// SyntheticNote is the first line of a report on seeded noise instead of data.
const reviewSyntheticNote = "No data was given: these statistics describe the model's response to seeded Gaussian noise, not data."

func plural(n int, word string) string {
	if n == 1 {
		return "1 " + word
	}
	return strconv.Itoa(n) + " " + word + "s"
}

func reviewAbout(r *Report) string {
	var parts []string
	if r.Model.Path != "" {
		parts = append(parts, "model "+r.Model.Path)
	}
	if r.Model.Opset > 0 {
		parts = append(parts, fmt.Sprintf("opset %d", r.Model.Opset))
	}
	if r.Model.Producer != "" {
		parts = append(parts, "produced by "+r.Model.Producer)
	}
	parts = append(parts, fmt.Sprintf("%d nodes", r.Model.Nodes), fmt.Sprintf("%d parameters", r.Model.Parameters))
	src := "data file"
	if r.Input.Source == "synthetic" {
		src = "seeded Gaussian noise"
	}
	parts = append(parts, fmt.Sprintf("%d samples of %s", r.Input.Samples, src))
	if r.Version != "" {
		parts = append(parts, "vitals "+r.Version)
	}
	return strings.Join(parts, " · ")
}

func reviewOutput(o *Output) []string {
	if o == nil {
		return nil
	}
	out := []string{fmt.Sprintf("output %s: %d classes, softmax distribution: %v", o.Name, o.Classes, o.IsDistribution)}
	if o.MeanMaxProb != nil {
		out = append(out, "mean top-1 probability "+FmtNum(o.MeanMaxProb))
	}
	if o.Labeled > 0 {
		out = append(out, fmt.Sprintf("with %d labels: accuracy %s, mean cross-entropy %s (ln(classes) = %s)",
			o.Labeled, FmtPercent(o.Accuracy), FmtNum(o.CrossEntropy), FmtNum(o.LnClasses)))
	}
	return out
}

func reviewComparison(c *Comparison) *reviewCompare {
	rc := &reviewCompare{Old: c.Old, New: c.New, Unmatched: c.Unmatched}
	arrow := func(a, b string) string {
		if a == "—" && b == "—" {
			return "—"
		}
		return a + " → " + b
	}
	sqnr := false
	for _, d := range c.Layers {
		sqnr = sqnr || d.SQNRdB != nil
	}
	rc.Header = reviewDeltaHeader
	if sqnr {
		rc.Header = append(append([]string{}, reviewDeltaHeader...), "SQNR dB")
	}
	for _, d := range c.Layers {
		row := []string{d.Node, d.OldNode, d.Op,
			arrow(FmtNum(d.MeanOld), FmtNum(d.MeanNew)), arrow(FmtNum(d.StdOld), FmtNum(d.StdNew)),
			arrow(FmtPct(d.DeadOld), FmtPct(d.DeadNew)), arrow(FmtPct(d.SaturatedOld), FmtPct(d.SaturatedNew)),
			FmtNum(d.HistogramDistance)}
		if sqnr {
			row = append(row, FmtNum(d.SQNRdB))
		}
		rc.Layers = append(rc.Layers, row)
	}
	for _, w := range c.Weights {
		rc.Weights = append(rc.Weights, []string{w.Name, w.Node, FmtPct(w.RelativeChange)})
	}
	if a := c.Agreement; a != nil {
		rc.Agreement = []string{
			fmt.Sprintf("output %s over %d samples", a.Output, a.Samples),
			"top-1 agreement " + FmtPercent(a.Top1),
			"mean KL divergence (OLD ‖ NEW) " + FmtNum(a.MeanKL),
			"largest absolute output difference " + FmtNum(a.MaxAbsDiff),
		}
	}
	return rc
}

func reviewEvidence(ev map[string]any) string {
	keys := make([]string, 0, len(ev))
	for k := range ev {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		v := ev[k]
		switch x := v.(type) {
		case float64:
			v = FmtFloat(x)
		case []string: // e.g. the other layers of a spread finding: the first two and the count
			if len(x) > 3 {
				v = fmt.Sprintf("[%s … %d in all]", strings.Join(x[:2], " "), len(x))
			}
		}
		parts[i] = fmt.Sprintf("%s=%v", k, v)
	}
	return strings.Join(parts, ", ")
}

func reviewShape(s []int) string {
	if s == nil {
		return "—"
	}
	parts := make([]string, len(s))
	for i, d := range s {
		parts[i] = strconv.Itoa(d)
	}
	return "[" + strings.Join(parts, "×") + "]"
}

func numCell(p *float64) reviewCell { return reviewCell{FmtNum(p), Val(p)} }

func pctCell(p *float64) reviewCell {
	c := reviewCell{FmtPct(p), Val(p)}
	if p != nil {
		c.Num = 100 * *p
	}
	return c
}

func intCell(n int64) reviewCell { return reviewCell{strconv.FormatInt(n, 10), float64(n)} }
