package report

import (
	"bytes"
	"strings"
	"testing"
)

// mdTables splits Markdown into tables: each is its header, separator and rows.
func mdTables(md string) [][]string {
	var tables [][]string
	var cur []string
	for _, l := range strings.Split(md, "\n") {
		if strings.HasPrefix(l, "|") {
			cur = append(cur, l)
			continue
		}
		if cur != nil {
			tables = append(tables, cur)
			cur = nil
		}
	}
	return tables
}

// mdCells counts the cells of a table line, honouring escaped pipes.
func mdCells(line string) int {
	return strings.Count(strings.ReplaceAll(line, `\|`, ""), "|") - 1
}

// figureFiles is Assets with figures of these names and no bytes (the
// Markdown writer links to the files and never reads the bytes).
func figureFiles(names ...string) Assets {
	var a Assets
	for _, n := range names {
		a.Figures = append(a.Figures, Figure{File: n})
	}
	return a
}

func TestWriteMarkdownCheck(t *testing.T) {
	r := sampleCheckReport()
	var b bytes.Buffer
	if err := WriteMarkdown(&b, r, figureFiles("weights.png", "histograms-01.png", "depth-profile.png", "unit-health.png")); err != nil {
		t.Fatal(err)
	}
	md := b.String()
	first := strings.SplitN(md, "\n", 2)[0]
	if first != "**2 errors, 4 warnings in 5 layers**" {
		t.Errorf("first line %q", first)
	}
	tables := mdTables(md)
	if len(tables) != 3 {
		t.Fatalf("want findings, layers and weights tables, got %d", len(tables))
	}
	for _, tb := range tables {
		n := mdCells(tb[0])
		if !strings.HasPrefix(tb[1], "| ---") && !strings.HasPrefix(tb[1], "| --:") {
			t.Errorf("no separator under %q: %q", tb[0], tb[1])
		}
		for _, row := range tb[1:] {
			if mdCells(row) != n {
				t.Errorf("row %q has %d cells, header %d", row, mdCells(row), n)
			}
		}
	}
	if got := len(tables[0]) - 2; got != len(r.Findings) {
		t.Errorf("findings rows %d, want %d", got, len(r.Findings))
	}
	if got := len(tables[1]) - 2; got != len(r.Layers) {
		t.Errorf("layer rows %d, want %d", got, len(r.Layers))
	}
	if got := len(tables[2]) - 2; got != len(r.Weights) {
		t.Errorf("weight rows %d, want %d", got, len(r.Weights))
	}
	// Ranked order: rank 1 first; the info finding last.
	if !strings.Contains(tables[0][2], "| 1 | `/layer3/layer3.0/relu/Relu` | error | dead-units |") {
		t.Errorf("first finding row %q", tables[0][2])
	}
	if !strings.Contains(md, "`/head/fc1\\|proj/Gemm`") || strings.Contains(md, "fc1|proj") {
		t.Error("pipe in a node name is not escaped")
	}
	// Layers in depth order, with the unit columns.
	if !strings.HasPrefix(tables[1][2], "| `/features/conv1/Conv` | Conv | [8×16×32×32] |") ||
		!strings.Contains(tables[1][9], "| 56.2 |") {
		t.Errorf("layer rows %q / %q", tables[1][2], tables[1][9])
	}
	// Images in figure order, relative links.
	i1, i2 := strings.Index(md, "](depth-profile.png)"), strings.Index(md, "](weights.png)")
	if i1 < 0 || i2 < i1 || !strings.Contains(md, "](histograms-01.png)") {
		t.Error("image links missing or out of order")
	}
	for _, s := range []string{"## How to read this", "**dead-units**", "**weight-scale**"} {
		if !strings.Contains(md, s) {
			t.Errorf("missing %q", s)
		}
	}
	if !strings.HasSuffix(strings.TrimSpace(md), Caution) {
		t.Error("the caution does not end the report")
	}
	if strings.Contains(md, "## Comparison") {
		t.Error("comparison section in a check report")
	}
}

func TestWriteMarkdownSyntheticAndClean(t *testing.T) {
	r := sampleCheckReport()
	r.Input.Source = "synthetic"
	r.Findings, r.Ranking = nil, nil
	var b bytes.Buffer
	if err := WriteMarkdown(&b, r, Assets{}); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(b.String(), "\n")
	if !strings.Contains(lines[0], "seeded Gaussian noise, not data") {
		t.Errorf("first line %q", lines[0])
	}
	if lines[2] != "**No findings at warning level or above**" {
		t.Errorf("verdict %q", lines[2])
	}
	if strings.Contains(b.String(), "## Figures") {
		t.Error("figures section without images")
	}
}

func TestWriteMarkdownCompare(t *testing.T) {
	r := sampleCompareReport()
	var b bytes.Buffer
	if err := WriteMarkdown(&b, r, figureFiles("compare-depth-profile.png", "compare-histograms-01.png")); err != nil {
		t.Fatal(err)
	}
	md := b.String()
	for _, s := range []string{"## Comparison: OLD `models/smallcnn-epoch10.onnx` → NEW `models/smallcnn.onnx`",
		"### Matched layers", "### Weight changes", "### Output agreement", "top-1 agreement 93.0%",
		"### Unmatched layers", "- `/head/dropout/Dropout (OLD only)`", "dead % OLD → NEW"} {
		if !strings.Contains(md, s) {
			t.Errorf("missing %q", s)
		}
	}
	tables := mdTables(md)
	if len(tables) != 5 || len(tables[3])-2 != len(r.Compare.Layers) || len(tables[4])-2 != len(r.Compare.Weights) {
		t.Fatalf("tables %d", len(tables))
	}
	if !strings.Contains(md, "| 9.4 → 56.2 |") {
		t.Error("dead fraction change of layer3.0/relu missing")
	}
	if strings.Index(md, "](compare-histograms-01.png)") > strings.Index(md, "](compare-depth-profile.png)") {
		t.Error("compare figures out of order")
	}
}

// Evidence lists longer than three entries (the other layers of a spread
// finding) show their first two and the count, so that the evidence column
// stays readable; numbers keep 4 significant digits.
func TestReviewEvidenceLists(t *testing.T) {
	got := reviewEvidence(map[string]any{"also": []string{"a", "b", "c", "d"}, "few": []string{"x", "y"}, "ratio": 0.0123456})
	if want := "also=[a b … 4 in all], few=[x y], ratio=0.01235"; got != want {
		t.Errorf("reviewEvidence = %q, want %q", got, want)
	}
}

// A comparison against a quantized or float16 model carries each matched
// layer's SQNR (Comparison.Layers[i].SQNRdB): the Markdown and HTML tables
// gain an "SQNR dB" column with it; a float-against-float comparison, none.
func TestCompareTablesSQNRColumn(t *testing.T) {
	r := sampleCompareReport()
	for _, w := range []struct {
		name  string
		write func(*bytes.Buffer, *Report) error
	}{
		{"markdown", func(b *bytes.Buffer, r *Report) error { return WriteMarkdown(b, r, Assets{}) }},
		{"html", func(b *bytes.Buffer, r *Report) error { b.WriteString(sampleHTML(t, r, nil)); return nil }},
	} {
		var b bytes.Buffer
		if err := w.write(&b, r); err != nil {
			t.Fatal(err)
		}
		if strings.Contains(b.String(), "SQNR dB") {
			t.Errorf("%s: SQNR column without any SQNR", w.name)
		}
	}
	q := sampleCompareReport()
	v := 31.25
	q.Compare.Layers[2].SQNRdB = &v
	var md bytes.Buffer
	if err := WriteMarkdown(&md, q, Assets{}); err != nil {
		t.Fatal(err)
	}
	tables := mdTables(md.String())
	header := tables[3][0]
	if !strings.HasSuffix(strings.TrimSpace(header), "SQNR dB |") {
		t.Errorf("markdown header %q", header)
	}
	if row := tables[3][2+2]; !strings.HasSuffix(strings.TrimSpace(row), "| 31.25 |") {
		t.Errorf("markdown row of layer 2: %q", row)
	}
	doc := sampleHTML(t, q, nil)
	deltas := doc[strings.Index(doc, `id="deltas"`):strings.Index(doc, `id="weight-deltas"`)]
	if !strings.Contains(deltas, "<th>SQNR dB</th>") || !strings.Contains(deltas, `<td class="n">31.25</td>`) {
		t.Error("html deltas table lacks the SQNR column or value")
	}
}
