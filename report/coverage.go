package report

import (
	"fmt"
	"strings"
)

// Coverage wording shared by every writer: one line among the first lines
// of the report, a warning before the verdict when nodes ran unobserved,
// and the list of nodes not observed grouped by reason.

// CoverageLine states how many nodes of the model, subgraph bodies
// included, the run observed ("" when the report has no coverage).
func CoverageLine(r *Report) string {
	c := r.Coverage
	if c == nil {
		return ""
	}
	in := ""
	if c.InSubgraphs > 0 {
		in = fmt.Sprintf(", %d of them inside If/Loop/Scan subgraphs", c.InSubgraphs)
	}
	switch {
	case c.Observed == c.Nodes:
		return fmt.Sprintf("Coverage: all %d nodes observed%s.", c.Nodes, in)
	case c.Observed == c.Executed:
		return fmt.Sprintf("Coverage: %d of %d nodes observed%s: every node that ran; %d sit in subgraphs that never ran on this sample (see Not observed).",
			c.Observed, c.Nodes, in, c.Nodes-c.Executed)
	}
	return fmt.Sprintf("Coverage: %d of %d nodes observed%s; %d nodes ran without being observed (see Not observed).",
		c.Observed, c.Nodes, in, c.Executed-c.Observed)
}

// CoverageWarning is a warning for the top of the report when some nodes
// ran without being observed: the statistics and checks miss them. "" otherwise.
func CoverageWarning(r *Report) string {
	c := r.Coverage
	if c == nil || c.Observed >= c.Executed {
		return ""
	}
	return fmt.Sprintf("WARNING: incomplete coverage: %d of the %d nodes that ran were not observed; no statistics or checks cover them.",
		c.Executed-c.Observed, c.Executed)
}

// CoverageGaps lists the nodes not observed, one line per reason (in the
// order first met) with the number of nodes and the first few names; the
// JSON report lists every node.
func CoverageGaps(r *Report) []string {
	if r.Coverage == nil {
		return nil
	}
	var order []string
	names := map[string][]string{}
	for _, u := range r.Coverage.NotObserved {
		if _, ok := names[u.Reason]; !ok {
			order = append(order, u.Reason)
		}
		names[u.Reason] = append(names[u.Reason], u.Node)
	}
	var out []string
	for _, reason := range order {
		ns := names[reason]
		shown := ns
		if len(shown) > 4 {
			shown = append(append([]string{}, ns[:4]...), "…")
		}
		out = append(out, fmt.Sprintf("%s: %s (%s)", reason, plural(len(ns), "node"), strings.Join(shown, ", ")))
	}
	return out
}
