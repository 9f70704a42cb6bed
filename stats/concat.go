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

// The same holds the other way round for a Split: its outputs partition
// its input exactly (the ONNX Split definition: the parts' sizes along the
// axis add up to the input's), so a value that a Split reads takes its
// statistics from the Split's outputs when each is an observed layer
// (GPT-2's query/key/value projection, split in three). Its other readers,
// if any, do not matter.

// deriveConcats is a variable so that tests can observe every Concat
// directly and compare.
var deriveConcats = true

// markConcats sets the parts of each Concat layer whose statistics can be
// merged from its inputs', and of each layer a Split reads whose
// statistics can be merged from the Split's outputs (after sameAs and
// scaleOf are assigned: a layer that another reuses batch by batch is
// observed itself).
func (c *Collector) markConcats() {
	if !deriveConcats {
		return
	}
	for _, la := range c.layers {
		n := la.node
		if la.act.kind != ActNone || la.act.hasSat || la.keepLast || la.sameAs != nil || la.scaleOf != nil ||
			c.watched(la.output) || c.InSubgraph(n) {
			continue
		}
		perChan := c.perChanWanted[la.output]
		isConcat := n.OpType == "Concat" && (n.Domain == "" || n.Domain == "ai.onnx") && len(n.Inputs) > 0 && len(n.Outputs) == 1 && la.output == n.Outputs[0]
		if !isConcat {
			if s := c.splitReader(la.output); s != nil && !perChan {
				la.parts = c.splitParts(s)
			}
			continue
		}
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

// splitReader returns a Split node (default domain, outside subgraphs)
// that reads value v as its data input, or nil.
func (c *Collector) splitReader(v string) *loader.Node {
	for _, r := range c.consumer[v] {
		if r.OpType == "Split" && (r.Domain == "" || r.Domain == "ai.onnx") && len(r.Inputs) > 0 && r.Inputs[0] == v && !c.InSubgraph(r) {
			return r
		}
	}
	return nil
}

// splitParts returns the layers of Split s's outputs, nil unless every
// output is an observed layer that is not itself merged from parts.
func (c *Collector) splitParts(s *loader.Node) []*layerAcc {
	if len(s.Outputs) == 0 {
		return nil
	}
	var parts []*layerAcc
	for _, o := range s.Outputs {
		p := c.byOut[o]
		if o == "" || p == nil || p.parts != nil {
			return nil
		}
		parts = append(parts, p)
	}
	return parts
}

// concatAlongChannels reports whether Concat n joins along axis 1 (the
// channel axis of the per-channel moments), as far as the attribute says
// without the rank: axis 1, or −(rank−1) checked when merging.
func concatAlongChannels(n *loader.Node) bool {
	a := n.Attrs["axis"]
	return a != nil && a.I == 1
}

// mergeConcats fills each layer merged from parts (a Concat's, a Split
// input's) from them (Finish, after every batch and shard is in).
func (c *Collector) mergeConcats() {
	done := map[*layerAcc]bool{}
	for _, la := range c.layers {
		c.mergeParts(la, done)
	}
}

// mergeParts fills la from its parts, after any part that is itself
// merged from parts (a Split's input comes before its outputs in graph
// order).
func (c *Collector) mergeParts(la *layerAcc, done map[*layerAcc]bool) {
	if la.parts == nil || done[la] {
		return
	}
	done[la] = true
	for _, p := range la.parts {
		c.mergeParts(p, done)
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
