package main

import (
	"fmt"
	"math"
	"os"
	"runtime/debug"
	"strconv"
	"strings"

	"github.com/vitals-health/vitals/check"
)

// parseBytes reads a byte count: a number with an optional binary unit K, M,
// G or T (also KB/KiB, ..., case-insensitive), e.g. 512M, 8G, 1.5GiB, 1000000.
// "0" means no budget.
func parseBytes(s string) (int64, error) {
	t := strings.ToUpper(strings.TrimSpace(s))
	t = strings.TrimSuffix(t, "IB")
	t = strings.TrimSuffix(t, "B")
	mult := 1.0
	if n := len(t); n > 0 {
		switch t[n-1] {
		case 'K':
			mult = 1 << 10
		case 'M':
			mult = 1 << 20
		case 'G':
			mult = 1 << 30
		case 'T':
			mult = 1 << 40
		}
		if mult != 1 {
			t = strings.TrimSpace(t[:n-1])
		}
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil || math.IsNaN(v) || v < 0 {
		return 0, fmt.Errorf("%q is not a byte count (want e.g. 512M, 8G or 0 for none)", s)
	}
	b := v * mult
	if b >= math.MaxInt64 {
		return 0, fmt.Errorf("%q is too large", s)
	}
	if b > 0 && b < 1 {
		return 0, fmt.Errorf("%q is less than one byte", s)
	}
	return int64(b), nil
}

// memoryBudget is the budget --max-memory gives ("": check.DefaultMemoryBudget).
func memoryBudget(flagValue string) (int64, error) {
	if flagValue == "" {
		return check.DefaultMemoryBudget(), nil
	}
	b, err := parseBytes(flagValue)
	if err != nil {
		return 0, userErr("--max-memory: %v", err)
	}
	return b, nil
}

// tuneGC keeps the peak heap near the weights plus one batch's working set.
// The weights of a large model stay alive for the whole run, and Go's default
// collector (GOGC=100) lets garbage grow as large as everything alive before
// it collects, so a 400 MB model could peak near 800 MB plus activations.
// Weights hold no pointers, which makes collections cheap however large they
// are, so with more than 128 MiB of weights (the sum over the models the
// command loaded) the collector runs once garbage reaches 128 MiB (as a
// share of the live heap, at least 25%). The collector's target is the
// process's, so the command, not the library, decides it.
func tuneGC(weights int64) {
	const allowance = 128 << 20
	if weights <= allowance || os.Getenv("GOGC") != "" {
		return // small models, or the user chose
	}
	debug.SetGCPercent(max(25, int(100*allowance/weights)))
}
