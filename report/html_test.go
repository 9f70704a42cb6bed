package report

import (
	"bytes"
	"encoding/base64"
	"regexp"
	"strings"
	"testing"
)

func sampleHTML(t *testing.T, r *Report, images map[string][]byte) string {
	t.Helper()
	var b bytes.Buffer
	var a Assets
	for name, png := range images {
		a.Figures = append(a.Figures, Figure{File: name, PNG: png})
	}
	if err := WriteHTML(&b, r, a); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

// fakePNG is a stand-in image payload: WriteHTML embeds bytes as they are.
var fakePNG = []byte("\x89PNG\r\n\x1a\nnot really an image")

func TestWriteHTMLCheck(t *testing.T) {
	r := sampleCheckReport()
	doc := sampleHTML(t, r, map[string][]byte{"depth-profile.png": fakePNG, "weights.png": []byte("w")})
	if !strings.HasPrefix(doc, "<!DOCTYPE html>") || !strings.HasSuffix(strings.TrimSpace(doc), "</html>") {
		t.Error("not a complete HTML document")
	}
	// Balanced structural tags.
	for _, tag := range []string{"table", "thead", "tbody", "tr", "td", "th", "ul", "li", "figure", "p", "h2", "code", "script", "style"} {
		open := len(regexp.MustCompile(`<`+tag+`[\s>]`).FindAllString(doc, -1))
		closed := strings.Count(doc, "</"+tag+">")
		if open != closed {
			t.Errorf("<%s>: %d opened, %d closed", tag, open, closed)
		}
	}
	// Self-contained: no network references of any kind.
	for _, s := range []string{"http://", "https://", "//cdn", "<link", "@import", "url("} {
		if strings.Contains(doc, s) {
			t.Errorf("external reference %q in the page", s)
		}
	}
	want := `src="data:image/png;base64,` + base64.StdEncoding.EncodeToString(fakePNG) + `"`
	if !strings.Contains(doc, want) || strings.Count(doc, `src="data:image/png;base64,`) != 2 {
		t.Error("images are not embedded as data URIs")
	}
	if strings.Index(doc, "depth-profile.png)") > strings.Index(doc, "weights.png)") {
		t.Error("figures out of order")
	}
	if n := strings.Count(doc, `<tr class="layer`); n != len(r.Layers) {
		t.Errorf("%d layer rows, want %d", n, len(r.Layers))
	}
	if !strings.Contains(doc, "<code>/head/fc1|proj/Gemm</code>") {
		t.Error("node with a pipe not shown as is")
	}
	if !strings.Contains(doc, `id="verdict">2 errors, 4 warnings in 5 layers</p>`) {
		t.Error("verdict missing")
	}
	if !strings.Contains(doc, Caution[:60]) || strings.Index(doc, Caution[:60]) < strings.Index(doc, "How to read this") {
		t.Error("caution missing or not at the end")
	}
	if !strings.Contains(doc, `<tr class="layer error"><td><code>/layer3/layer3.0/relu/Relu</code>`) {
		t.Error("flagged layer row not marked")
	}
	if !strings.Contains(doc, `data-v="56.25"`) {
		t.Error("numeric sort keys missing")
	}
}

func TestWriteHTMLEscapes(t *testing.T) {
	r := sampleCheckReport()
	r.Layers[0].Node = `<script>alert("x")</script>`
	r.Findings[0].Message = `a < b & "c"`
	r.Input.Source = "synthetic"
	doc := sampleHTML(t, r, nil)
	if strings.Contains(doc, `<script>alert`) || !strings.Contains(doc, "&lt;script&gt;alert") {
		t.Error("node name not escaped")
	}
	if !strings.Contains(doc, "a &lt; b &amp; &#34;c&#34;") {
		t.Error("message not escaped")
	}
	if i := strings.Index(doc, "<body>"); !strings.Contains(doc[i:i+200], "seeded Gaussian noise, not data") {
		t.Error("synthetic notice is not first in the body")
	}
	if strings.Contains(doc, "<figure>") {
		t.Error("figures without images")
	}
}

func TestWriteHTMLCompare(t *testing.T) {
	r := sampleCompareReport()
	doc := sampleHTML(t, r, nil)
	for _, s := range []string{"Comparison: OLD <code>models/smallcnn-epoch10.onnx</code>", `id="deltas"`, `id="weight-deltas"`,
		"top-1 agreement 93.0%", "<li><code>/head/dropout/Dropout (OLD only)</code></li>", "9.4 → 56.2"} {
		if !strings.Contains(doc, s) {
			t.Errorf("missing %q", s)
		}
	}
	if got := strings.Count(doc[strings.Index(doc, `id="deltas"`):strings.Index(doc, `id="weight-deltas"`)], "<tr>") - 1; got != len(r.Compare.Layers) {
		t.Errorf("%d delta rows, want %d", got, len(r.Compare.Layers))
	}
}
