package report

import (
	"math"
	"strconv"
)

// The number formatters every writer uses (terminal, Markdown, HTML and the
// evidence of findings), so that a value reads the same everywhere.

// Unknown is how every writer shows a value that was not measured or is not
// finite.
const Unknown = "—"

// FmtNum formats an optional statistic with 4 significant digits
// (strconv 'g' format: 0.0123, 1.235e+04), Unknown when nil or not finite.
func FmtNum(p *float64) string {
	if p == nil {
		return Unknown
	}
	return FmtFloat(*p)
}

// FmtFloat formats x like FmtNum.
func FmtFloat(x float64) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return Unknown
	}
	return strconv.FormatFloat(x, 'g', 4, 64)
}

// FmtPct formats an optional fraction f as the percentage 100·f with one
// decimal and no sign ("12.5"), for table columns headed "%"; Unknown when
// nil or not finite.
func FmtPct(p *float64) string {
	if p == nil || math.IsNaN(*p) || math.IsInf(*p, 0) {
		return Unknown
	}
	return strconv.FormatFloat(100**p, 'f', 1, 64)
}

// FmtPercent is FmtPct with a percent sign ("12.5%"), for prose and the
// terminal table.
func FmtPercent(p *float64) string {
	if s := FmtPct(p); s != Unknown {
		return s + "%"
	}
	return Unknown
}
