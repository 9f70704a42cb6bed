package stats

import (
	"fmt"
	"sort"

	"github.com/vitals-health/vitals/report"
)

// outlierFeaturesCheck: residual feature dimensions with large magnitude across positions and layers.
var outlierFeaturesCheck = &Check{
	Name: "outlier-features",
	Doc: "Residual-stream feature dimensions with |x| ≥ 6 at a large share of positions in many layers. " +
		"Dettmers et al. 2022 (LLM.int8()) define outlier features as magnitude ≥ 6 in at least 25% of the layers and at least 6% of the sequence positions; " +
		"per-tensor or per-token int8 quantization of such activations loses accuracy unless those dimensions stay in 16-bit (mixed-precision decomposition) " +
		"or the scales are per channel. The finding is on the first residual tensor that has the dimensions.",
	Defaults: map[string]float64{"outlier-features.layer_share": 0.25},
	Run: func(p *Pass) {
		r := p.Report
		idx := tfLayers(r, "residual-stream")
		if len(idx) == 0 {
			return
		}
		layersWith := map[int]int{}
		firstAt := map[int]int{}
		for _, i := range idx {
			l := r.Layers[i]
			if l.OutlierDims == nil {
				continue
			}
			for _, d := range *l.OutlierDims {
				if layersWith[d] == 0 {
					firstAt[d] = i
				}
				layersWith[d]++
			}
		}
		byLayer := map[int][]int{}
		for d, n := range layersWith {
			if float64(n)/float64(len(idx)) >= p.T("layer_share") {
				byLayer[firstAt[d]] = append(byLayer[firstAt[d]], d)
			}
		}
		var at []int
		for i := range byLayer {
			at = append(at, i)
		}
		sort.Ints(at)
		for _, i := range at {
			dims := byLayer[i]
			sort.Ints(dims)
			l := r.Layers[i]
			shares := []string{}
			for _, d := range dims {
				shares = append(shares, fmt.Sprintf("%d (%d of %d layers)", d, layersWith[d], len(idx)))
			}
			p.Emit(report.Warning, l.Node, float64(len(dims))*2, map[string]any{"block": *l.Block, "dims": dims, "residual_layers": len(idx),
				"magnitude": 6.0, "position_share": OutlierShare, "layer_share": p.T("layer_share")},
				"block %d, residual tensor %d: feature dimension(s) %v reach |x| ≥ 6 at ≥ 6%% of positions in ≥ %.0f%% of the residual layers (Dettmers et al. 2022 outlier features). "+
					"int8 note: quantizing these activations per tensor or per token will lose accuracy; keep these dimensions in 16-bit or use per-channel scales",
				*l.Block, *l.ResidualIndex, shares, 100*p.T("layer_share"))
		}
	},
}
