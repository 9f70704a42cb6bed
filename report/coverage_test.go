package report

import (
	"bytes"
	"strings"
	"testing"
)

// Coverage wording in every writer: the line among the first lines, the
// warning before the verdict when nodes ran unobserved, the grouped list of
// nodes not observed. The counts are the report's; the expected sentences
// are written out here.
func TestCoverageInEveryWriter(t *testing.T) {
	gap := func(node, reason string) Unobserved { return Unobserved{Node: node, Op: "Conv", Reason: reason} }
	const never = "else_branch of /If never taken on this sample"
	cases := []struct {
		name        string
		cov         Coverage
		line, warn  string
		gaps        []string
		firstLinesN int // the text report's line holding the coverage sentence (1-based)
	}{
		{"full", Coverage{Nodes: 22, Executed: 22, Observed: 22},
			"Coverage: all 22 nodes observed.", "", nil, 3},
		{"branch never taken", Coverage{Nodes: 15, InSubgraphs: 12, Executed: 9, Observed: 9,
			NotObserved: []Unobserved{gap("/If/else/a", never), gap("/If/else/b", never), gap("/If/else/c", never),
				gap("/If/else/d", never), gap("/If/else/e", never), gap("/If/else/f", never)}},
			"Coverage: 9 of 15 nodes observed, 12 of them inside If/Loop/Scan subgraphs: every node that ran; 6 sit in subgraphs that never ran on this sample (see Not observed).",
			"", []string{never + ": 6 nodes (/If/else/a, /If/else/b, /If/else/c, /If/else/d, …)"}, 3},
		{"ran unobserved", Coverage{Nodes: 10, Executed: 10, Observed: 8,
			NotObserved: []Unobserved{gap("/x", "ran without being observed"), gap("/y", "ran without being observed")}},
			"Coverage: 8 of 10 nodes observed; 2 nodes ran without being observed (see Not observed).",
			"WARNING: incomplete coverage: 2 of the 10 nodes that ran were not observed; no statistics or checks cover them.",
			[]string{"ran without being observed: 2 nodes (/x, /y)"}, 4},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			r := sampleCheckReport()
			r.Coverage = &tc.cov
			if got := CoverageLine(r); got != tc.line {
				t.Errorf("line %q\nwant %q", got, tc.line)
			}
			if got := CoverageWarning(r); got != tc.warn {
				t.Errorf("warning %q, want %q", got, tc.warn)
			}
			if got := CoverageGaps(r); strings.Join(got, "\n") != strings.Join(tc.gaps, "\n") {
				t.Errorf("gaps %q, want %q", got, tc.gaps)
			}
			var text, md bytes.Buffer
			if err := WriteText(&text, r, Assets{}); err != nil {
				t.Fatal(err)
			}
			lines := strings.Split(text.String(), "\n")
			if lines[tc.firstLinesN-1] != tc.line {
				t.Errorf("text line %d %q, want the coverage line", tc.firstLinesN, lines[tc.firstLinesN-1])
			}
			if tc.warn != "" && lines[1] != tc.warn {
				t.Errorf("text line 2 %q, want the warning", lines[1])
			}
			if err := WriteMarkdown(&md, r, Assets{}); err != nil {
				t.Fatal(err)
			}
			html := sampleHTML(t, r, nil)
			for _, s := range append([]string{tc.line}, tc.gaps...) {
				if !strings.Contains(text.String(), s) {
					t.Errorf("text report lacks %q", s)
				}
				if !strings.Contains(html, s) {
					t.Errorf("HTML report lacks %q", s)
				}
				if !strings.Contains(strings.ReplaceAll(md.String(), `\`, ""), strings.ReplaceAll(s, `\`, "")) {
					t.Errorf("Markdown report lacks %q", s)
				}
			}
			if tc.warn != "" {
				if first := strings.SplitN(md.String(), "\n", 2)[0]; first != "**"+tc.warn+"**" {
					t.Errorf("Markdown first line %q, want the warning", first)
				}
				if !strings.Contains(html, `id="coverage-warning">`+tc.warn) {
					t.Errorf("HTML lacks the warning")
				}
			}
		})
	}
}
