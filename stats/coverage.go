package stats

import (
	"fmt"

	"github.com/vitals-health/vitals/report"
)

// coverage counts the nodes of the model (subgraph bodies included) that ran
// and that the hook observed since the collector was made. A node ran when
// its graph ran (probe's run counts: the main graph once per batch, an If
// branch once per batch that took it, a Loop or Scan body once per
// iteration); it was observed when the hook saw it at least once. A node
// that ran unobserved is a gap in the statistics and says so as its reason.
func (c *Collector) coverage() *report.Coverage {
	f := c.flat
	cov := &report.Coverage{Nodes: len(f.Graph.Nodes), Subgraphs: []report.SubgraphRun{}, NotObserved: []report.Unobserved{}}
	runs := make([]int64, len(f.Subgraphs))
	nodes := make([]int, len(f.Subgraphs))
	for _, k := range f.In {
		if k >= 0 {
			nodes[k]++
		}
	}
	for k := range f.Subgraphs {
		runs[k] = f.Subgraphs[k].Runs() - c.runs0[k]
		cov.Subgraphs = append(cov.Subgraphs, report.SubgraphRun{Name: f.Subgraphs[k].Prefix,
			Op: f.Subgraphs[k].Owner.OpType, Nodes: nodes[k], Runs: runs[k]})
	}
	mainRan := c.Plan.Runs() > c.mainRuns0
	for i, n := range f.Graph.Nodes {
		k := f.In[i]
		if k >= 0 {
			cov.InSubgraphs++
		}
		ran := mainRan
		if k >= 0 {
			ran = runs[k] > 0
		}
		if ran {
			cov.Executed++
		}
		if c.hits[i] > 0 {
			cov.Observed++
			continue
		}
		reason := "ran without being observed"
		switch {
		case !ran && k < 0:
			reason = "the model did not run"
		case !ran:
			reason = c.notRun(runs, k)
		}
		cov.NotObserved = append(cov.NotObserved, report.Unobserved{Node: n.Name, Op: n.OpType, Reason: reason})
	}
	return cov
}

// notRun explains why subgraph k never ran, naming the outermost enclosing
// subgraph that never ran (a branch never taken, a body with no iteration).
func (c *Collector) notRun(runs []int64, k int) string {
	subs := c.flat.Subgraphs
	top := k
	for p := subs[k].Parent; p >= 0 && runs[p] == 0; p = subs[p].Parent {
		top = p
	}
	s := subs[top]
	why := fmt.Sprintf("%s of %s (%s) ran 0 times on this sample", s.Attr, s.Owner.Name, s.Owner.OpType)
	if s.Owner.OpType == "If" {
		why = fmt.Sprintf("%s of %s never taken on this sample", s.Attr, s.Owner.Name)
	}
	if top != k {
		why = "inside " + subs[k].Prefix + ": " + why
	}
	return why
}
