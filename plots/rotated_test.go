package plots

import (
	"os"
	"path/filepath"
	"testing"
)

// TestRenderRotatedAndLog renders a 30-layer log-scale profile (rotated
// names) and its unit-health chart, to look at with VITALS_PLOTS_OUT set.
func TestRenderRotatedAndLog(t *testing.T) {
	dir := outDir(t, "synthetic")
	r := syntheticReport(30, 0.7)
	for _, c := range []*Chart{DepthProfileSpec(r), UnitHealthSpec(r)} {
		b, err := renderToBytes(c)
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dir, c.File), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
}
