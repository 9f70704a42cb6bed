package stats

import (
	"fmt"
	"math"
	"sort"
	"strings"

	"github.com/vitals-health/vitals/report"
)

// quantNoiseCheck judges the SQNR of NEW against OLD along depth when
// `vitals compare` compares a float model with a quantized or float16 one
// (sqnr.go: SQNR = 10·log10(Σx²/Σ(x−x̂)²) dB per matched layer, written to
// the compare layers' sqnr_db before the compare checks run).
var quantNoiseCheck = &Check{
	Name: "quant-noise",
	Doc: "Where the signal-to-quantization-noise ratio SQNR = 10·log10(Σx²/Σ(x−x̂)²) of NEW (quantized or float16) against OLD (float) drops most from one matched layer to the next along depth, naming the quantizers in between. " +
		"Each 6.02 dB of SQNR is one bit of resolution (the standard quantization-noise relation for a uniform quantizer, 20·log10 2 dB per bit); " +
		"a drop of drop_db or more (default one bit) at one layer is a warning: that layer or its quantizer loses more resolution than the layers before it, usually a scale calibrated on unrepresentative data. " +
		"Smaller drops are information with the layers ranked by SQNR in the evidence.",
	Defaults: map[string]float64{"quant-noise.drop_db": dbPerBit},
	Run: func(p *Pass) {
		if p.SQNR == nil || p.Report.Compare == nil {
			return
		}
		rs := p.SQNR.Results() // in NEW's depth order
		if len(rs) == 0 {
			return
		}
		limit := p.T("drop_db")
		worst, drop := -1, math.Inf(-1)
		for i := 1; i < len(rs); i++ {
			if d := rs[i-1].DB - rs[i].DB; !math.IsNaN(d) && d > drop {
				worst, drop = i, d
			}
		}
		ranked := append([]SQNRResult(nil), rs...)
		sort.SliceStable(ranked, func(i, j int) bool { return ranked[i].DB < ranked[j].DB })
		var list, parts []string
		for _, x := range ranked {
			list = append(list, x.NewNode)
			if len(parts) < 5 {
				parts = append(parts, fmt.Sprintf("%s %.1f dB", x.NewNode, x.DB))
			}
		}
		// the layers by SQNR, lowest first (each layer's value is its sqnr_db)
		ev := map[string]any{"ranked_by_sqnr": list, "drop_warning_db": limit}
		capped := ""
		for _, x := range rs {
			if x.Batches < x.Seen {
				ev["batches_compared"], ev["batches"] = x.Batches, x.Seen
				capped = fmt.Sprintf(" (SQNR over the first %d of %d batches: the float tensors kept for it reached %d MiB)",
					x.Batches, x.Seen, p.SQNR.KeepLimit()>>20)
				break
			}
		}
		if worst < 0 {
			x := rs[0]
			p.Emit(report.Info, x.NewNode, 1, ev, "SQNR of NEW against OLD: %.1f dB at %s (the only matched layer)%s", x.DB, x.NewNode, capped)
			return
		}
		prev, cur := rs[worst-1], rs[worst]
		ev["sqnr_db"], ev["previous_sqnr_db"], ev["previous_node"], ev["drop_db"] = sqnrNum(cur.DB), sqnrNum(prev.DB), prev.NewNode, drop
		sev, strength := report.Info, 1.0
		if drop >= limit {
			sev, strength = report.Warning, drop/limit
		}
		where := ""
		if between := p.SQNR.QuantizersBetween(prev.Depth, cur.Depth); len(between) > 0 {
			ev["quantizers_between"] = between
			where = "; quantized in between by " + strings.Join(between, ", ")
		}
		p.Emit(sev, cur.NewNode, strength, ev,
			"the SQNR of NEW against OLD drops most at %s: %.1f dB after %.1f dB at %s (−%.1f dB, %.1f bits of resolution lost there%s); lowest first: %s%s",
			cur.NewNode, cur.DB, prev.DB, prev.NewNode, drop, drop/dbPerBit, where, strings.Join(parts, ", "), capped)
	},
}
