package plots

import (
	"encoding/json"
	"io"
	"os"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// BenchmarkRender measures drawing every figure of a report in memory
// (what `vitals check --out` adds to a run before writing the files). The
// report is VITALS_BENCH_REPORT (a report.json written by `vitals check
// --out`, e.g. of the deep model bench/report.sh exports) or, without it,
// the committed sample report of a small CNN.
func BenchmarkRender(b *testing.B) {
	r := benchReport(b)
	for _, bc := range []struct {
		name string
		o    Options
	}{{"default", Options{}}, {"one-worker", Options{Workers: 1}}, {"all", Options{All: true}}} {
		b.Run(bc.name, func(b *testing.B) {
			for i := 0; i < b.N; i++ {
				a, err := Render(r, bc.o)
				if err != nil {
					b.Fatal(err)
				}
				if i == 0 {
					b.ReportMetric(float64(len(a.Figures)), "figures")
				}
			}
		})
	}
}

// BenchmarkWriteReport measures what --out adds to a check: drawing the
// figures and writing report.json and every format's output (to io.Discard,
// so that disk speed is left out).
func BenchmarkWriteReport(b *testing.B) {
	r := benchReport(b)
	for i := 0; i < b.N; i++ {
		a, err := Render(r, Options{})
		if err != nil {
			b.Fatal(err)
		}
		for _, f := range report.Formats {
			if err := f.Write(io.Discard, r, a); err != nil {
				b.Fatal(err)
			}
		}
	}
}

func benchReport(b *testing.B) *report.Report {
	path := os.Getenv("VITALS_BENCH_REPORT")
	if path == "" {
		path = "../report/testdata/sample-check.json"
	}
	data, err := os.ReadFile(path)
	if err != nil {
		b.Fatal(err)
	}
	var r report.Report
	if err := json.Unmarshal(data, &r); err != nil {
		b.Fatal(err)
	}
	return &r
}
