package report

import (
	"bufio"
	"encoding/base64"
	"html/template"
	"io"
	"math"
	"strconv"
)

// WriteHTML writes the review report as one self-contained HTML page: the
// same content as WriteMarkdown, with a.Figures (rendered in memory by
// plots.Render) embedded as data: URIs, an
// inline style sheet and a few lines of inline JavaScript that sort the layer
// and weight tables when a column header is clicked (numbers numerically,
// unknown values last). It makes no external request and works offline.
func WriteHTML(w io.Writer, r *Report, a Assets) error {
	images := make(map[string][]byte, len(a.Figures))
	for _, f := range a.Figures {
		images[f.File] = f.PNG
	}
	rv := buildReview(r, a.figureNames())
	type img struct {
		Caption string
		File    string
		Src     template.URL
	}
	var imgs []img
	for _, im := range rv.Images {
		// The URI is built here from base64 text only, so it is safe to mark.
		src := template.URL("data:image/png;base64," + base64.StdEncoding.EncodeToString(images[im.File]))
		imgs = append(imgs, img{im.Caption, im.File, src})
	}
	b := bufio.NewWriter(w)
	err := htmlPage.Execute(b, map[string]any{
		"R": r, "V": rv, "Images": imgs, "Notes": a.Notes,
		"Grad":        htmlGradients(r),
		"LayerHeader": reviewLayerHeader, "WeightHeader": reviewWeightHeader,
	})
	if err != nil {
		return err
	}
	return b.Flush()
}

// sortKey is the data-v attribute of a numeric cell ("" for unknown).
func sortKey(c reviewCell) string {
	if math.IsNaN(c.Num) || math.IsInf(c.Num, 0) {
		return ""
	}
	return strconv.FormatFloat(c.Num, 'g', -1, 64)
}

var htmlPage = template.Must(template.New("report").Funcs(template.FuncMap{"key": sortKey}).Parse(htmlTemplate))

const htmlTemplate = `<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>vitals review: {{.R.Model.Path}}</title>
<style>
body { font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; color: #1c1f2a; margin: 0 auto; padding: 1.2em 2em 3em; max-width: 1280px; }
h1 { font-size: 1.45em; margin: .6em 0 .2em; }
h2 { font-size: 1.2em; margin-top: 1.8em; border-bottom: 1px solid #c9cfdc; padding-bottom: .2em; }
h3 { font-size: 1.02em; margin-top: 1.3em; }
.synthetic { background: #fff4d6; border-left: 4px solid #d08a00; padding: .5em .8em; font-weight: 600; }
.verdict { font-size: 1.15em; font-weight: 700; margin: .4em 0; }
.verdict.bad { color: #a3182a; } .verdict.good { color: #1d6b45; }
.about { color: #525a6e; }
table { border-collapse: collapse; margin: .6em 0 1em; font-size: .9em; }
th, td { border: 1px solid #d6dae4; padding: .28em .55em; vertical-align: top; }
th { background: #eef1f7; text-align: left; }
td.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
code { font: .92em ui-monospace, "DejaVu Sans Mono", monospace; }
table.sortable th { cursor: pointer; user-select: none; }
table.sortable th[aria-sort=ascending]::after { content: " ▲"; }
table.sortable th[aria-sort=descending]::after { content: " ▼"; }
tr.error td:first-child { border-left: 4px solid #b3192c; }
tr.warning td:first-child { border-left: 4px solid #e08a00; }
.sev-error { color: #a3182a; font-weight: 700; } .sev-warning { color: #9a5c00; font-weight: 700; }
figure { margin: 1em 0 1.6em; } figure img { max-width: 100%; border: 1px solid #d6dae4; }
figcaption { color: #525a6e; font-size: .9em; }
.caution { background: #f3f4f8; padding: .7em 1em; border-left: 4px solid #7a8194; }
.hint { color: #525a6e; font-size: .88em; }
</style>
</head>
<body>
{{if .V.Synthetic}}<p class="synthetic" id="synthetic">Synthetic input. No data was given: these statistics describe the model's response to seeded Gaussian noise, not data.</p>
{{end}}{{if .V.CoverageWarning}}<p class="synthetic" id="coverage-warning">{{.V.CoverageWarning}}</p>
{{end}}<p class="verdict {{if or .V.Errors .V.Warnings}}bad{{else}}good{{end}}" id="verdict">{{.V.Verdict}}</p>
<h1>vitals review: <code>{{.R.Model.Path}}</code></h1>
<p class="about">{{.V.About}}</p>
{{if .V.Coverage}}<p class="about" id="coverage">{{.V.Coverage}}</p>
{{end}}
<h2>Findings</h2>
{{if .V.Findings}}<table id="findings">
<thead><tr><th>rank</th><th>node</th><th>severity</th><th>check</th><th>message</th><th>key evidence</th></tr></thead>
<tbody>
{{range .V.Findings}}<tr><td class="n">{{.Rank}}</td><td><code>{{.Node}}</code></td><td class="sev-{{.Severity}}">{{.Severity}}</td><td>{{.Check}}</td><td>{{.Message}}</td><td>{{.Evidence}}</td></tr>
{{end}}</tbody>
</table>
{{else}}<p>No findings.</p>
{{end}}
{{if or .Images .Notes}}<h2>Figures</h2>
{{range .Images}}<figure><img src="{{.Src}}" alt="{{.Caption}}"><figcaption>{{.Caption}} ({{.File}})</figcaption></figure>
{{end}}{{if .Notes}}<ul class="notes">{{range .Notes}}<li>{{.}}</li>{{end}}</ul>
{{end}}{{end}}
{{if .V.Output}}<h2>Output</h2>
<ul>{{range .V.Output}}<li>{{.}}</li>{{end}}</ul>
{{end}}
<h2>Layers (depth order)</h2>
<p class="hint">Click a column header to sort; click again to reverse.</p>
<table class="sortable" id="layers">
<thead><tr>{{range .LayerHeader}}<th>{{.}}</th>{{end}}</tr></thead>
<tbody>
{{range .V.LayerRows}}<tr class="layer {{.Severity}}"><td><code>{{.Node}}</code></td><td>{{.Op}}</td><td>{{.Shape}}</td>{{range .Cells}}<td class="n" data-v="{{key .}}">{{.Text}}</td>{{end}}</tr>
{{end}}</tbody>
</table>
{{if .V.WeightRows}}<h2>Weights</h2>
<table class="sortable" id="weights">
<thead><tr>{{range .WeightHeader}}<th>{{.}}</th>{{end}}</tr></thead>
<tbody>
{{range .V.WeightRows}}<tr><td><code>{{.Name}}</code></td><td><code>{{.Node}}</code></td><td>{{.Shape}}</td>{{range .Cells}}<td class="n" data-v="{{key .}}">{{.Text}}</td>{{end}}</tr>
{{end}}</tbody>
</table>
{{end}}
{{with .Grad}}<h2>Gradients (backward pass)</h2>
<ul>{{range .Summary}}<li>{{.}}</li>{{end}}</ul>
{{range .Tables}}{{if .Rows}}<table class="sortable">
<thead><tr>{{range .Header}}<th>{{.}}</th>{{end}}</tr></thead>
<tbody>
{{range .Rows}}<tr>{{range $i, $c := .}}{{if lt $i 2}}<td><code>{{$c}}</code></td>{{else}}<td class="n">{{$c}}</td>{{end}}{{end}}</tr>
{{end}}</tbody>
</table>
{{end}}{{end}}{{end}}
{{with .V.Compare}}<h2>Comparison: OLD <code>{{.Old}}</code> → NEW <code>{{.New}}</code></h2>
<h3>Matched layers</h3>
<table id="deltas">
<thead><tr>{{range .Header}}<th>{{.}}</th>{{end}}</tr></thead>
<tbody>
{{range .Layers}}<tr>{{range $i, $c := .}}{{if lt $i 2}}<td><code>{{$c}}</code></td>{{else if eq $i 2}}<td>{{$c}}</td>{{else}}<td class="n">{{$c}}</td>{{end}}{{end}}</tr>
{{end}}</tbody>
</table>
<h3>Weight changes ‖W_new − W_old‖/‖W_old‖</h3>
<table id="weight-deltas">
<thead><tr><th>tensor</th><th>node</th><th>relative change %</th></tr></thead>
<tbody>
{{range .Weights}}<tr><td><code>{{index . 0}}</code></td><td><code>{{index . 1}}</code></td><td class="n">{{index . 2}}</td></tr>
{{end}}</tbody>
</table>
<h3>Output agreement</h3>
{{if .Agreement}}<ul>{{range .Agreement}}<li>{{.}}</li>{{end}}</ul>{{else}}<p>Not measured.</p>{{end}}
<h3>Unmatched layers</h3>
{{if .Unmatched}}<ul>{{range .Unmatched}}<li><code>{{.}}</code></li>{{end}}</ul>{{else}}<p>None: every layer was matched.</p>{{end}}
{{end}}
{{if .V.Gaps}}<h2>Not observed</h2>
<ul id="not-observed">{{range .V.Gaps}}<li>{{.}}</li>{{end}}</ul>
{{end}}<h2>How to read this</h2>
<ul>
{{range .V.HowTo}}<li><strong>{{.Name}}</strong>: {{.Means}} {{.Do}}</li>
{{end}}</ul>
<p>Every finding lists the numbers it was judged on; thresholds can be changed with <code>--config</code>.</p>

<h2>Caution</h2>
<p class="caution" id="caution">{{.V.Caution}}</p>

<script>
(function () {
  // Sort a table body by column i: numbers (data-v) numerically, unknown last, text alphabetically.
  function key(cell) { return cell.hasAttribute("data-v") ? cell.getAttribute("data-v") : cell.textContent.trim(); }
  function compare(a, b, numeric) {
    if (!numeric) { return a.localeCompare(b); }
    if (a === "" || b === "") { return (a === "") - (b === ""); }
    return parseFloat(a) - parseFloat(b);
  }
  function sortBy(table, th, i) {
    var asc = th.getAttribute("aria-sort") !== "ascending";
    var numeric = table.tBodies[0].rows.length > 0 && table.tBodies[0].rows[0].cells[i].hasAttribute("data-v");
    var rows = Array.prototype.slice.call(table.tBodies[0].rows);
    rows.sort(function (x, y) {
      var a = key(x.cells[i]), b = key(y.cells[i]);
      if (numeric && (a === "" || b === "")) { return compare(a, b, true); }
      var c = compare(a, b, numeric);
      return asc ? c : -c;
    });
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (h) { h.removeAttribute("aria-sort"); });
    th.setAttribute("aria-sort", asc ? "ascending" : "descending");
    rows.forEach(function (r) { table.tBodies[0].appendChild(r); });
  }
  Array.prototype.forEach.call(document.querySelectorAll("table.sortable"), function (table) {
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th, i) {
      th.title = "sort by " + th.textContent;
      th.addEventListener("click", function () { sortBy(table, th, i); });
    });
    table.setAttribute("data-sort-ready", "yes");
  });
  // #sort=ID:COLUMN sorts a table on load (links into a sorted view; used by the rendering test).
  var m = /^#sort=([\w-]+):(\d+)$/.exec(window.location.hash);
  var t = m && document.getElementById(m[1]);
  if (t && t.tHead.rows[0].cells[+m[2]]) { sortBy(t, t.tHead.rows[0].cells[+m[2]], +m[2]); }
})();
</script>
</body>
</html>
`

// htmlGradients is the gradient section of the HTML page (nil without a backward pass).
func htmlGradients(r *Report) any {
	lines := GradientSummary(r)
	if lines == nil {
		return nil
	}
	type table struct {
		Header []string
		Rows   [][]string
	}
	return map[string]any{"Summary": lines, "Tables": []table{
		{GradientLayerHeader, GradientLayerRows(r)}, {GradientWeightHeader, GradientWeightRows(r)}}}
}
