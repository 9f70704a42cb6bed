package plots

import (
	"bytes"
	"fmt"
	"image/png"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// writeAll renders r and writes its figures into dir, as the command does
// with --out, and returns the file names in figure order.
func writeAll(dir string, r *report.Report, o Options) ([]string, report.Assets, error) {
	a, err := Render(r, o)
	if err != nil {
		return nil, a, err
	}
	var names []string
	for _, f := range a.Figures {
		names = append(names, f.File)
	}
	return names, a, WriteFiles(dir, a)
}

func TestWriteAllCheckAndCompare(t *testing.T) {
	for _, tc := range []struct {
		fixture string
		want    []string
	}{
		{"sample-check.json", []string{"depth-profile.png", "unit-health.png", "histograms-01.png", "weights.png"}},
		{"sample-compare.json", []string{"depth-profile.png", "unit-health.png", "histograms-01.png", "weights.png",
			"compare-histograms-01.png", "compare-depth-profile.png"}},
	} {
		t.Run(tc.fixture, func(t *testing.T) {
			dir := outDir(t, strings.TrimSuffix(tc.fixture, ".json"))
			names, a, err := writeAll(dir, loadSample(t, tc.fixture), Options{})
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(names, tc.want) {
				t.Fatalf("wrote %v, want %v", names, tc.want)
			}
			if len(a.Notes) != 0 {
				t.Errorf("notes for a report with every figure: %q", a.Notes)
			}
			for i, n := range names {
				b, err := os.ReadFile(filepath.Join(dir, n))
				if err != nil {
					t.Fatal(err)
				}
				if !bytes.Equal(b, a.Figures[i].PNG) {
					t.Errorf("%s on disk differs from the figure in memory", n)
				}
				img, err := png.Decode(bytes.NewReader(b))
				if err != nil {
					t.Fatalf("%s: %v", n, err)
				}
				if w := img.Bounds().Dx(); w != widthPx {
					t.Errorf("%s is %d px wide, want %d", n, w, widthPx)
				}
			}
			left, _ := filepath.Glob(filepath.Join(dir, ".*.tmp-*"))
			if len(left) > 0 {
				t.Errorf("temporary files left behind: %v", left)
			}
		})
	}
}

// Rendering in parallel gives the same bytes as one figure at a time.
func TestRenderParallelSameBytes(t *testing.T) {
	r := loadSample(t, "sample-compare.json")
	one, err := Render(r, Options{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	four, err := Render(r, Options{Workers: 4})
	if err != nil {
		t.Fatal(err)
	}
	if len(one.Figures) != len(four.Figures) {
		t.Fatalf("%d figures with 1 worker, %d with 4", len(one.Figures), len(four.Figures))
	}
	for i := range one.Figures {
		if one.Figures[i].File != four.Figures[i].File || !bytes.Equal(one.Figures[i].PNG, four.Figures[i].PNG) {
			t.Errorf("figure %d (%s) differs between 1 and 4 workers", i, one.Figures[i].File)
		}
	}
}

// A deep report gets DefaultHistogramPages pages and a note that counts the
// layers left out; --all (Options.All) draws every page.
func TestRenderCapsHistogramPages(t *testing.T) {
	n := 16*DefaultHistogramPages + 21
	r := syntheticReport(n, 0.99)
	for i := range r.Layers {
		r.Layers[i].Histogram = &report.Histogram{Edges: []float64{0, 1, 2}, Counts: []int64{3, 1}}
	}
	r.Ranking = []report.Rank{{Node: r.Layers[n-1].Node, Score: 3}}
	count := func(a report.Assets) (pages int, notes []string) {
		for _, f := range a.Figures {
			if strings.HasPrefix(f.File, "histograms-") {
				pages++
			}
		}
		for _, n := range a.Notes {
			if strings.HasPrefix(n, "Histograms:") {
				notes = append(notes, n)
			}
		}
		return pages, notes
	}
	a, err := Render(r, Options{})
	if err != nil {
		t.Fatal(err)
	}
	p, notes := count(a)
	if p != DefaultHistogramPages {
		t.Errorf("%d histogram pages by default, want %d", p, DefaultHistogramPages)
	}
	want := fmt.Sprintf("%d of %d pages drawn, the %d worst-ranked of %d layers; %d layers left out", DefaultHistogramPages,
		DefaultHistogramPages+2, 16*DefaultHistogramPages, n, 21)
	if len(notes) != 1 || !strings.Contains(notes[0], want) {
		t.Errorf("notes %q, want one containing %q", a.Notes, want)
	}
	// the worst-ranked layer (the deepest here) is on the first page
	if pg := HistogramPagesSpec(r)[0]; !strings.Contains(pg.Panels[0].Title, "block"+fmt.Sprint(n-1)) {
		t.Errorf("first panel %q is not the worst-ranked layer", pg.Panels[0].Title)
	}
	all, err := Render(r, Options{All: true})
	if err != nil {
		t.Fatal(err)
	}
	if p, notes := count(all); p != DefaultHistogramPages+2 || len(notes) != 0 {
		t.Errorf("%d histogram pages with All, want %d; notes %q", p, DefaultHistogramPages+2, notes)
	}
}

// A report whose layers are not activations says why the depth profile and
// the unit-health figure are missing instead of leaving them out silently.
func TestRenderNotesWhyFiguresAreMissing(t *testing.T) {
	r := &report.Report{Layers: []report.Layer{{Node: "mm", Op: "MatMul", Std: report.Num(1), Mean: report.Num(0)}}}
	a, err := Render(r, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(a.Figures) != 0 {
		t.Errorf("figures %v for a report with nothing to draw", a.Figures)
	}
	joined := strings.Join(a.Notes, "\n")
	for _, want := range []string{"No depth profile: the model has no activation layer", "No unit-health figure",
		"No histograms", "No weight-scale figure", "Gelu", "Swish"} {
		if !strings.Contains(joined, want) {
			t.Errorf("notes lack %q:\n%s", want, joined)
		}
	}
}

func TestWriteAllEmptyReport(t *testing.T) {
	names, _, err := writeAll(t.TempDir(), &report.Report{Compare: &report.Comparison{}}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(names) != 0 {
		t.Errorf("empty report wrote %v", names)
	}
}

func TestWriteAllMissingDir(t *testing.T) {
	if _, _, err := writeAll(filepath.Join(t.TempDir(), "nope"), &report.Report{}, Options{}); err == nil {
		t.Error("want an error for a missing directory")
	}
}
