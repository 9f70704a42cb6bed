package main

import (
	"bufio"
	"fmt"
	"math"
	"os"
	"runtime/debug"
	"strconv"
	"strings"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/tensor"
)

// fallbackBudget is the memory budget when /proc/meminfo cannot be read.
const fallbackBudget = 8 << 30

// defaultBudget is half the physical memory (MemTotal in /proc/meminfo), or 8 GiB.
func defaultBudget() int64 {
	f, err := os.Open("/proc/meminfo")
	if err != nil {
		return fallbackBudget
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		fields := strings.Fields(sc.Text())
		if len(fields) >= 2 && fields[0] == "MemTotal:" {
			kb, err := strconv.ParseInt(fields[1], 10, 64)
			if err != nil || kb <= 0 {
				break
			}
			return kb * 1024 / 2
		}
	}
	return fallbackBudget
}

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

// applyMemoryBudget sets the process-wide budget from --max-memory ("" = default).
func applyMemoryBudget(flagValue string) error {
	b := defaultBudget()
	if flagValue != "" {
		var err error
		if b, err = parseBytes(flagValue); err != nil {
			return userErr("--max-memory: %v", err)
		}
	}
	tensor.SetMemoryBudget(b)
	return nil
}

// loadedWeights sums the initializer bytes of every model loaded so far.
var loadedWeights int64

// tuneGC keeps the peak heap near the weights plus one batch's working set.
// The weights of a large model stay alive for the whole run, and Go's default
// collector (GOGC=100) lets garbage grow as large as everything alive before
// it collects, so a 400 MB model could peak near 800 MB plus activations.
// Weights hold no pointers, which makes collections cheap however large they
// are, so with more than 128 MiB of weights the collector runs once garbage
// reaches 128 MiB (as a share of the live heap, at least 25%).
func tuneGC(m *loader.Model) {
	var w int64
	var walk func(g *loader.Graph)
	walk = func(g *loader.Graph) {
		for _, t := range g.Initializers {
			w += tensor.Bytes(t.DType, t.Size())
		}
		for _, n := range g.Nodes {
			for _, a := range n.Attrs {
				if a.G != nil {
					walk(a.G)
				}
				for _, sg := range a.Graphs {
					walk(sg)
				}
			}
		}
	}
	walk(m.Graph)
	loadedWeights += w
	const allowance = 128 << 20
	if loadedWeights <= allowance || os.Getenv("GOGC") != "" {
		return // small models, or the user chose
	}
	debug.SetGCPercent(max(25, int(100*allowance/loadedWeights)))
}
