package stats

import "github.com/vitals-health/vitals/loader"

// A Concat passes its inputs' values on side by side, unchanged: its output
// holds exactly the values of its inputs. When every input is a layer
// observed in full, the Concat's statistics are theirs merged, instead of
// one more pass over values already read once (in DenseNet the
// concatenations are about a third of the values observed, and on such
// networks the statistics pass is bound by reading memory): moments by
// the pairwise formula (Moments.Merge, as batches and shards merge; the
// mean and spread then differ from a pass of their own only in the last
// float64 bits), histograms exactly (power-of-two aligned grids merge
// without splitting a bin, MergeHist), extremes, zeros and non-finite
// counts exactly, and, for a concatenation along axis 1 that feeds a
// BatchNormalization, the per-channel moments side by side.

// deriveConcats is a variable so that tests can observe every Concat
// directly and compare.
var deriveConcats = true

// markConcats sets the parts of each Concat layer whose statistics can be
// merged from its inputs' (after sameAs and scaleOf are assigned: a layer
// that another reuses batch by batch is observed itself).
func (c *Collector) markConcats() {
	if !deriveConcats {
		return
	}
	for _, la := range c.layers {
		n := la.node
		if n.OpType != "Concat" || (n.Domain != "" && n.Domain != "ai.onnx") || len(n.Inputs) == 0 || len(n.Outputs) != 1 ||
			la.output != n.Outputs[0] || la.act.kind != ActNone || la.act.hasSat || la.keepLast || la.sameAs != nil ||
			la.scaleOf != nil || c.watched(la.output) || c.InSubgraph(n) {
			continue
		}
		perChan := c.perChanWanted[la.output]
		if perChan && !concatAlongChannels(n) {
			continue
		}
		var parts []*layerAcc
		for _, in := range n.Inputs {
			p := c.byOut[in]
			if p == nil || in == "" || p.node == nil || c.InSubgraph(p.node) || (perChan && (p.sameAs != nil || p.scaleOf != nil)) {
				parts = nil
				break
			}
			parts = append(parts, p)
		}
		if parts == nil {
			continue
		}
		la.parts = parts
		if perChan {
			for _, p := range parts {
				c.perChanWanted[p.output] = true
			}
		}
	}
}

// concatAlongChannels reports whether Concat n joins along axis 1 (the
// channel axis of the per-channel moments), as far as the attribute says
// without the rank: axis 1, or −(rank−1) checked when merging.
func concatAlongChannels(n *loader.Node) bool {
	a := n.Attrs["axis"]
	return a != nil && a.I == 1
}

// mergeConcats fills each derived Concat layer from its parts (Finish,
// after every batch and shard is in). Layers are in graph order, so a
// Concat of Concats finds its parts filled.
func (c *Collector) mergeConcats() {
	for _, la := range c.layers {
		if la.parts == nil {
			continue
		}
		la.mom = NewMoments()
		la.hist = Histogram{}
		for _, p := range la.parts {
			la.mom.Merge(p.mom)
			if p.hist.Counts != nil {
				la.hist.MergeHist(&p.hist)
			}
		}
		la.perChan = nil
		if c.perChanWanted[la.output] {
			var pc []Moments
			for _, p := range la.parts {
				pc = append(pc, p.perChan...)
			}
			if len(la.shape) >= 2 && len(pc) == la.shape[1] {
				la.perChan = pc
			}
		}
	}
}
