package report

import (
	"encoding/json"
	"fmt"
	"io"
	"strings"
	"text/tabwriter"
)

// WriteJSON writes the report as indented JSON (the contract of
// docs/design.md); the assets are not part of it.
func WriteJSON(w io.Writer, r *Report, _ Assets) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(r)
}

// Verdict is the one-line summary: counts of errors and warnings and the layers they fall on.
func Verdict(r *Report) string { return verdictLine(verdictCounts(r.Findings)) + "." }

// SourceLine says what the statistics describe (first line of every report).
func SourceLine(r *Report) string {
	if r.Input.Source == "synthetic" {
		return fmt.Sprintf("NOTE: no --data given: these statistics describe the model's response to %d samples of seeded unit-Gaussian noise, not real data.", r.Input.Samples)
	}
	var names []string
	for _, in := range r.Input.PerInput {
		n := in.Name
		if in.Path != "" {
			n += " ← " + in.Path
		}
		names = append(names, n)
	}
	line := fmt.Sprintf("Statistics over %d samples (%s).", r.Input.Samples, strings.Join(names, "; "))
	if r.Input.Note != "" {
		line += " NOTE: " + r.Input.Note + "."
	}
	return line
}

func colour(on bool, s Severity, text string) string {
	if !on {
		return text
	}
	switch s {
	case Error:
		return "\x1b[1;31m" + text + "\x1b[0m"
	case Warning:
		return "\x1b[33m" + text + "\x1b[0m"
	}
	return "\x1b[36m" + text + "\x1b[0m"
}

// WriteText writes the terminal report: source line, verdict, ranked
// findings (top 10 layers unless All), output summary, the per-layer table in
// depth order, the notes on figures (when plots were drawn), and the caution.
// a.Color adds ANSI colours; a.All lists every ranked layer.
func WriteText(w io.Writer, r *Report, o Assets) error {
	b := &strings.Builder{}
	fmt.Fprintln(b, SourceLine(r))
	if w := CoverageWarning(r); w != "" {
		fmt.Fprintln(b, w)
	}
	fmt.Fprintf(b, "Model %s: opset %d, %d nodes, %d parameters, producer %q.\n", r.Model.Path, r.Model.Opset, r.Model.Nodes, r.Model.Parameters, r.Model.Producer)
	if l := CoverageLine(r); l != "" {
		fmt.Fprintln(b, l)
	}
	fmt.Fprintln(b)
	fmt.Fprintln(b, "Verdict: "+Verdict(r))
	if len(r.Ranking) > 0 {
		fmt.Fprintln(b)
		fmt.Fprintln(b, "Unhealthy layers, worst first:")
		limit := len(r.Ranking)
		if !o.All && limit > 10 {
			limit = 10
		}
		for i, rk := range r.Ranking[:limit] {
			fmt.Fprintf(b, "%2d. %s  (score %.1f)\n", i+1, rk.Node, rk.Score)
			var own []Finding
			for _, f := range r.Findings {
				if f.Node == rk.Node {
					own = append(own, f)
				}
			}
			for _, g := range foldAlike(own, o.All) {
				fmt.Fprintf(b, "    %s %s: %s%s\n", colour(o.Color, g.Severity, strings.ToUpper(string(g.Severity))), g.Check, g.Message, g.more())
			}
		}
		if limit < len(r.Ranking) {
			fmt.Fprintf(b, "    … %d more layers with findings (--all shows every one)\n", len(r.Ranking)-limit)
		}
	}
	var infos []Finding
	for _, f := range r.Findings {
		if f.Severity == Info {
			ranked := false
			for _, rk := range r.Ranking {
				if rk.Node == f.Node {
					ranked = true
				}
			}
			if !ranked {
				infos = append(infos, f)
			}
		}
	}
	if len(infos) > 0 {
		fmt.Fprintln(b)
		fmt.Fprintln(b, "Notes:")
		for _, g := range foldAlike(infos, o.All) {
			fmt.Fprintf(b, "    %s %s (%s): %s%s\n", colour(o.Color, Info, "INFO"), g.Check, g.Node, g.Message, g.more())
		}
	}
	if r.Compare != nil {
		writeCompareText(b, r.Compare)
	}
	fmt.Fprintln(b)
	fmt.Fprintln(b, "Layers in depth order:")
	tw := tabwriter.NewWriter(b, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "depth\tnode\top\tshape\tmean\tstd\tmin\tmax\tzero\tdead\tsaturated\tnon-finite\t")
	for _, l := range r.Layers {
		fmt.Fprintf(tw, "%d\t%s\t%s\t%v\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%d\t\n", l.Depth, l.Node, l.Op, l.Shape,
			FmtNum(l.Mean), FmtNum(l.Std), FmtNum(l.Min), FmtNum(l.Max), FmtPercent(l.ZeroFraction), FmtPercent(l.DeadFraction), FmtPercent(l.SaturatedFraction), l.Nonfinite)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	writeGradientsText(b, r)
	if gaps := CoverageGaps(r); len(gaps) > 0 {
		fmt.Fprintln(b)
		fmt.Fprintln(b, "Not observed:")
		for _, g := range gaps {
			fmt.Fprintln(b, "    "+g)
		}
	}
	writeQuantText(b, r)
	if len(o.Notes) > 0 {
		fmt.Fprintln(b)
		fmt.Fprintln(b, "Figures:")
		for _, n := range o.Notes {
			fmt.Fprintln(b, "    "+n)
		}
	}
	fmt.Fprintln(b)
	fmt.Fprintln(b, Caution)
	_, err := io.WriteString(w, b.String())
	return err
}

// writeCompareText prints the checkpoint comparison: output agreement, the
// layers whose histograms moved most, weight changes and unmatched names.
func writeCompareText(b *strings.Builder, c *Comparison) {
	fmt.Fprintln(b)
	fmt.Fprintf(b, "Comparison: OLD %s → NEW %s\n", c.Old, c.New)
	if a := c.Agreement; a != nil {
		fmt.Fprintf(b, "  output %q over %d rows: top-1 agreement %s, mean KL(OLD‖NEW) %s, max |Δ| %s\n", a.Output, a.Samples, FmtPercent(a.Top1), FmtNum(a.MeanKL), FmtNum(a.MaxAbsDiff))
	}
	tw := tabwriter.NewWriter(b, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "  node\top\tmean OLD→NEW\tstd OLD→NEW\tdead OLD→NEW\tsaturated OLD→NEW\thistogram TV\t")
	for _, d := range c.Layers {
		fmt.Fprintf(tw, "  %s\t%s\t%s → %s\t%s → %s\t%s → %s\t%s → %s\t%s\t\n", d.Node, d.Op, FmtNum(d.MeanOld), FmtNum(d.MeanNew), FmtNum(d.StdOld), FmtNum(d.StdNew),
			FmtPercent(d.DeadOld), FmtPercent(d.DeadNew), FmtPercent(d.SaturatedOld), FmtPercent(d.SaturatedNew), FmtNum(d.HistogramDistance))
	}
	tw.Flush()
	writeSQNRText(b, c)
	if len(c.Weights) > 0 {
		fmt.Fprintln(b, "  weight change ‖W_new − W_old‖/‖W_old‖:")
		for _, w := range c.Weights {
			fmt.Fprintf(b, "    %-28s %s\n", w.Name, FmtNum(w.RelativeChange))
		}
	}
	if len(c.Unmatched) > 0 {
		fmt.Fprintf(b, "  not matched between the checkpoints: %s\n", strings.Join(c.Unmatched, ", "))
	}
}

// alike is a finding standing for itself and Others more of the same check,
// severity and node (one per attention head, say).
type alike struct {
	Finding
	Others int
}

func (a alike) more() string {
	if a.Others == 0 {
		return ""
	}
	return fmt.Sprintf(" (+%d more like it on this layer; --all lists each)", a.Others)
}

// foldAlike keeps, unless all, the first finding of each (check, severity,
// node) and counts the rest: a layer with a per-head finding on 12 heads
// reads as one line, not 12. Order is that of the first of each group.
func foldAlike(fs []Finding, all bool) []alike {
	var out []alike
	at := map[[3]string]int{}
	for _, f := range fs {
		k := [3]string{f.Check, string(f.Severity), f.Node}
		if i, ok := at[k]; ok && !all {
			out[i].Others++
			continue
		}
		at[k] = len(out)
		out = append(out, alike{Finding: f})
	}
	return out
}
