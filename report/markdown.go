package report

import (
	"bufio"
	"io"
	"strings"
)

// WriteMarkdown writes the review report as GitHub-flavoured Markdown: the
// verdict first (preceded by a notice when the input was synthetic noise),
// the ranked findings, links to the images (file names relative to the
// Markdown file, in figure order; a.Figures' bytes are not read) and the
// notes on figures not drawn, the per-layer table in depth order, the
// weights table, for a comparison the OLD → NEW sections, a short "How to
// read this" and the caution. Pipes in names are escaped.
func WriteMarkdown(w io.Writer, r *Report, a Assets) error {
	rv := buildReview(r, a.figureNames())
	b := bufio.NewWriter(w)
	p := func(lines ...string) {
		for _, l := range lines {
			b.WriteString(l)
			b.WriteByte('\n')
		}
	}
	if rv.Synthetic {
		p("**Synthetic input.** "+reviewSyntheticNote, "")
	}
	if rv.CoverageWarning != "" {
		p("**"+mdText(rv.CoverageWarning)+"**", "")
	}
	p("**"+rv.Verdict()+"**", "")
	p("# vitals review: "+mdText(r.Model.Path), "", mdText(rv.About), "")
	if rv.Coverage != "" {
		p(mdText(rv.Coverage), "")
	}

	p("## Findings", "")
	if len(rv.Findings) == 0 {
		p("No findings.", "")
	} else {
		mdTable(b, []string{"rank", "node", "severity", "check", "message", "key evidence"}, "r-----", len(rv.Findings), func(i int) []string {
			f := rv.Findings[i]
			return []string{f.Rank, mdCode(f.Node), f.Severity, f.Check, mdText(f.Message), mdText(f.Evidence)}
		})
	}
	if len(rv.Images)+len(a.Notes) > 0 {
		p("## Figures", "")
		for _, im := range rv.Images {
			p("!["+mdText(im.Caption)+"]("+mdLink(im.File)+")", "")
		}
		for _, n := range a.Notes {
			p("- " + mdText(n))
		}
		if len(a.Notes) > 0 {
			p("")
		}
	}
	if len(rv.Output) > 0 {
		p("## Output", "")
		for _, o := range rv.Output {
			p("- " + mdText(o))
		}
		p("")
	}
	p("## Layers (depth order)", "")
	mdTable(b, reviewLayerHeader, "lll"+strings.Repeat("r", 8), len(rv.LayerRows), func(i int) []string {
		l := rv.LayerRows[i]
		return append([]string{mdCode(l.Node), mdText(l.Op), l.Shape}, cellTexts(l.Cells)...)
	})
	if len(rv.WeightRows) > 0 {
		p("## Weights", "")
		mdTable(b, reviewWeightHeader, "lll"+strings.Repeat("r", 8), len(rv.WeightRows), func(i int) []string {
			wr := rv.WeightRows[i]
			return append([]string{mdCode(wr.Name), mdCode(wr.Node), wr.Shape}, cellTexts(wr.Cells)...)
		})
	}
	if lines := GradientSummary(r); lines != nil {
		p("## Gradients (backward pass)", "")
		for _, l := range lines {
			p("- " + mdText(l))
		}
		p("")
		for _, t := range []struct {
			h    []string
			code int // columns in code font
			rows [][]string
		}{{GradientLayerHeader, 1, GradientLayerRows(r)}, {GradientWeightHeader, 2, GradientWeightRows(r)}} {
			if len(t.rows) == 0 {
				continue
			}
			align := "ll" + strings.Repeat("r", len(t.h)-2)
			mdTable(b, t.h, align, len(t.rows), func(i int) []string {
				row := append([]string(nil), t.rows[i]...)
				for k := 0; k < t.code; k++ {
					row[k] = mdCode(row[k])
				}
				return row
			})
		}
	}
	if c := rv.Compare; c != nil {
		p("## Comparison: OLD "+mdCode(c.Old)+" → NEW "+mdCode(c.New), "")
		p("### Matched layers", "")
		mdTable(b, c.Header, "lll"+strings.Repeat("r", len(c.Header)-3), len(c.Layers), func(i int) []string {
			row := c.Layers[i]
			return append([]string{mdCode(row[0]), mdCode(row[1]), mdText(row[2])}, row[3:]...)
		})
		p("### Weight changes ‖W_new − W_old‖/‖W_old‖", "")
		mdTable(b, []string{"tensor", "node", "relative change %"}, "llr", len(c.Weights), func(i int) []string {
			return []string{mdCode(c.Weights[i][0]), mdCode(c.Weights[i][1]), c.Weights[i][2]}
		})
		p("### Output agreement", "")
		if len(c.Agreement) == 0 {
			p("Not measured.")
		}
		for _, a := range c.Agreement {
			p("- " + mdText(a))
		}
		p("", "### Unmatched layers", "")
		if len(c.Unmatched) == 0 {
			p("None: every layer was matched.")
		}
		for _, u := range c.Unmatched {
			p("- " + mdCode(u))
		}
		p("")
	}
	if len(rv.Gaps) > 0 {
		p("## Not observed", "")
		for _, g := range rv.Gaps {
			p("- " + mdText(g))
		}
		p("")
	}
	p("## How to read this", "")
	for _, c := range rv.HowTo {
		p("- **" + c.Name + "**: " + c.Means + " " + c.Do)
	}
	p("", "Every finding lists the numbers it was judged on; thresholds can be changed with `--config`.", "")
	p("## Caution", "", rv.Caution)
	return b.Flush()
}

// mdTable writes a GFM table; align has one letter per column (l or r).
func mdTable(b *bufio.Writer, header []string, align string, n int, row func(int) []string) {
	line := func(cells []string) {
		b.WriteString("| " + strings.Join(cells, " | ") + " |\n")
	}
	hs := make([]string, len(header))
	seps := make([]string, len(header))
	for i, h := range header {
		hs[i] = mdText(h)
		seps[i] = "---"
		if i < len(align) && align[i] == 'r' {
			seps[i] = "--:"
		}
	}
	line(hs)
	line(seps)
	for i := 0; i < n; i++ {
		line(row(i))
	}
	b.WriteByte('\n')
}

func cellTexts(cs []reviewCell) []string {
	out := make([]string, len(cs))
	for i, c := range cs {
		out[i] = c.Text
	}
	return out
}

// mdText makes s safe inside a table cell or a line: pipes escaped, line
// breaks flattened, Markdown emphasis and HTML characters neutralised.
func mdText(s string) string {
	r := strings.NewReplacer("|", `\|`, "\r", " ", "\n", " ", "*", `\*`, "_", `\_`, "<", "&lt;", ">", "&gt;", "[", `\[`, "]", `\]`, "`", "'")
	return r.Replace(s)
}

// mdCode writes a name as inline code; GFM still needs pipes escaped inside
// code spans in tables.
func mdCode(s string) string {
	if s == "" {
		return "—"
	}
	r := strings.NewReplacer("|", `\|`, "`", "'", "\n", " ", "\r", " ")
	return "`" + r.Replace(s) + "`"
}

// mdLink escapes a relative file name for a link target.
func mdLink(s string) string {
	return strings.NewReplacer(" ", "%20", "(", "%28", ")", "%29").Replace(s)
}
