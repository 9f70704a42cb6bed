package report

import (
	"fmt"
	"sort"
	"strings"
)

// writeSQNRText lists the matched layers that have an SQNR (float against
// quantized or float16), lowest first: SQNR = 10·log10(Σx²/Σ(x−x̂)²) dB.
func writeSQNRText(b *strings.Builder, c *Comparison) {
	var ds []LayerDelta
	for _, d := range c.Layers {
		if d.SQNRdB != nil {
			ds = append(ds, d)
		}
	}
	if len(ds) == 0 {
		return
	}
	sort.SliceStable(ds, func(i, j int) bool { return *ds[i].SQNRdB < *ds[j].SQNRdB })
	fmt.Fprintln(b, "  SQNR of NEW against OLD, lowest first (dB; 6.02 dB per bit of resolution):")
	for _, d := range ds {
		old := ""
		if d.OldNode != d.Node {
			old = " ← OLD " + d.OldNode
		}
		fmt.Fprintf(b, "    %-28s %6.2f  (%s, matched by %s%s)\n", d.Node, *d.SQNRdB, d.Op, d.SQNRMatch, old)
	}
}
