package stats

import (
	"fmt"
	"sort"

	"github.com/vitals-health/vitals/report"
)

// sevFor grades v against warning/error thresholds (higher is worse).
func sevFor(v, warn, errT float64) (report.Severity, bool) {
	switch {
	case v >= errT:
		return report.Error, true
	case v >= warn:
		return report.Warning, true
	}
	return "", false
}

func pct(x float64) string { return fmt.Sprintf("%.1f%%", 100*x) }

func sortFloats(s []float64) { sort.Float64s(s) }
