package plots

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"testing"

	"github.com/vitals-health/vitals/report"
)

// loadSample reads a sample report written by the report package's
// TestSampleFixtures (a small CNN on 512 images; see report/sample_test.go).
func loadSample(t *testing.T, name string) *report.Report {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "report", "testdata", name))
	if err != nil {
		t.Fatal(err)
	}
	var r report.Report
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	return &r
}

// outDir is VITALS_PLOTS_OUT when set (to look at the images), else a temp dir.
func outDir(t *testing.T, sub string) string {
	t.Helper()
	if d := os.Getenv("VITALS_PLOTS_OUT"); d != "" {
		d = filepath.Join(d, sub)
		if err := os.MkdirAll(d, 0o755); err != nil {
			t.Fatal(err)
		}
		return d
	}
	return t.TempDir()
}

func renderToBytes(c *Chart) ([]byte, error) {
	var b bytes.Buffer
	err := RenderChart(&b, c)
	return b.Bytes(), err
}
