package plots

import (
	"bytes"
	"image/png"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/report"
)

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
			names, err := WriteAll(dir, loadSample(t, tc.fixture))
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(names, tc.want) {
				t.Fatalf("wrote %v, want %v", names, tc.want)
			}
			for _, n := range names {
				b, err := os.ReadFile(filepath.Join(dir, n))
				if err != nil {
					t.Fatal(err)
				}
				img, err := png.Decode(bytes.NewReader(b))
				if err != nil {
					t.Fatalf("%s: %v", n, err)
				}
				if w := img.Bounds().Dx(); w != widthPx {
					t.Errorf("%s is %d px wide, want %d", n, w, widthPx)
				}
			}
			left, _ := filepath.Glob(filepath.Join(dir, ".*.tmp"))
			if len(left) > 0 {
				t.Errorf("temporary files left behind: %v", left)
			}
		})
	}
}

func TestWriteAllEmptyReport(t *testing.T) {
	names, err := WriteAll(t.TempDir(), &report.Report{Compare: &report.Comparison{}})
	if err != nil {
		t.Fatal(err)
	}
	if len(names) != 0 {
		t.Errorf("empty report wrote %v", names)
	}
}

func TestWriteAllMissingDir(t *testing.T) {
	if _, err := WriteAll(filepath.Join(t.TempDir(), "nope"), &report.Report{}); err == nil {
		t.Error("want an error for a missing directory")
	}
}
