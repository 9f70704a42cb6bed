package stats

import (
	"sort"

	"github.com/vitals-health/vitals/report"
)

// tfLayers returns the indices of the layers with the given role, in block
// order; "attention-probabilities" includes the fused attention nodes.
func tfLayers(r *report.Report, role string) []int {
	var idx []int
	for i, l := range r.Layers {
		if (l.Structure == role || (role == "attention-probabilities" && l.Structure == "attention (fused)")) && l.Block != nil {
			idx = append(idx, i)
		}
	}
	key := func(l report.Layer) int {
		if l.ResidualIndex != nil {
			return *l.ResidualIndex
		}
		return *l.Block
	}
	sort.SliceStable(idx, func(a, b int) bool { return key(r.Layers[idx[a]]) < key(r.Layers[idx[b]]) })
	return idx
}
