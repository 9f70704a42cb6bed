package main

import (
	"fmt"
	"math"
	"sort"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/check"
)

// FuzzParseThresholds: the --config parser never panics, accepts only
// non-empty names with finite values, and what it accepts survives a round
// trip through the line format.
func FuzzParseThresholds(f *testing.F) {
	for _, s := range []string{
		`{"dead-units.warning": 0.3, "saturation.error": 0.5}`,
		"dead-units.warning: 0.3\n# comment\nsaturation.error: 0.5 # trailing\n",
		"'spread-collapse.warning': 1e-3\r\n\"weight-scale.low\": .5\n",
		"x: NaN\n", "x: +Inf\n", ": 1\n", "{}", "{\"\": 1}", "a: 1: 2\n", "\n\n  \t\n",
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		th, err := ParseThresholds(b)
		if err != nil {
			return
		}
		var lines []string
		for k, v := range th {
			if strings.TrimSpace(k) == "" || math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("accepted %q: %v", k, v)
			}
			if strings.ContainsAny(k, "#:\n\r") || k != strings.TrimSpace(k) || strings.Trim(k, `"'`) != k || strings.HasPrefix(k, "{") {
				continue // names the line format cannot spell (a leading '{' reads as JSON)
			}
			lines = append(lines, fmt.Sprintf("%s: %v", k, v))
		}
		sort.Strings(lines)
		again, err := ParseThresholds([]byte(strings.Join(lines, "\n")))
		if err != nil {
			t.Fatalf("re-parsing %q: %v", lines, err)
		}
		for k, v := range again {
			if th[k] != v {
				t.Fatalf("%q: %v became %v", k, th[k], v)
			}
		}
	})
}

func TestParseThresholdsRejects(t *testing.T) {
	for _, s := range []string{"x: NaN", "x: inf", "x: -Inf", ": 1", "'': 2", `{"": 1}`, "x 1", "x: one", `{"x": "1"}`} {
		if th, err := ParseThresholds([]byte(s)); err == nil {
			t.Errorf("%q accepted: %v", s, th)
		}
	}
	th, err := ParseThresholds([]byte("dead-units.warning: 0.3 # ok\n'saturation.error': 5e-1"))
	if err != nil || th["dead-units.warning"] != 0.3 || th["saturation.error"] != 0.5 || len(th) != 2 {
		t.Errorf("got %v, %v", th, err)
	}
}

func TestParseBytes(t *testing.T) {
	for s, want := range map[string]int64{"512M": 512 << 20, "8G": 8 << 30, "8GiB": 8 << 30, "1.5g": 3 << 29, "100": 100, "64kb": 64 << 10, "2T": 2 << 40, "0": 0, " 4 G ": 4 << 30} {
		got, err := parseBytes(s)
		if err != nil || got != want {
			t.Errorf("parseBytes(%q) = %d, %v; want %d", s, got, err, want)
		}
	}
	for _, s := range []string{"", "G", "-1G", "NaN", "1X", "9999999T", "0.5"} {
		if got, err := parseBytes(s); err == nil {
			t.Errorf("parseBytes(%q) = %d, want an error", s, got)
		}
	}
	if b := check.DefaultMemoryBudget(); b < 64<<20 {
		t.Errorf("default budget %d bytes", b)
	}
}
