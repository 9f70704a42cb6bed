package main

import (
	"errors"
	"fmt"
	"io"
	"sort"
	"strings"
	"text/tabwriter"

	flag "github.com/spf13/pflag"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
)

// cmdOps lists the supported operators, or with --model which of a model's operators are supported.
func cmdOps(args []string, stdout, stderr io.Writer) (int, error) {
	fs := flag.NewFlagSet("ops", flag.ContinueOnError)
	fs.SetOutput(stderr)
	model := fs.String("model", "", "list this model's operators and whether each is supported")
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0, nil
		}
		return 2, userErr("%v", err)
	}
	tw := tabwriter.NewWriter(stdout, 2, 4, 2, ' ', 0)
	if *model == "" {
		fmt.Fprintln(tw, "operator\tdomain\tsince opset (versions that changed semantics)\t")
		for _, o := range probe.Ops() {
			dom := o.Domain
			if dom == "" {
				dom = "ai.onnx"
			}
			vs := make([]string, len(o.Versions))
			for i, v := range o.Versions {
				vs[i] = fmt.Sprint(v)
			}
			fmt.Fprintf(tw, "%s\t%s\t%s\t\n", o.Op, dom, strings.Join(vs, ", "))
		}
		fmt.Fprintf(tw, "\n%d operators; a model's opset picks the newest version not above it.\n", len(probe.Ops()))
		return 0, tw.Flush()
	}
	m, err := loader.LoadModel(*model)
	if err != nil {
		return 2, inputErr{err}
	}
	type use struct {
		op, domain string
		opset      int64
		count      int
	}
	uses := map[string]*use{}
	var walk func(g *loader.Graph)
	walk = func(g *loader.Graph) {
		for _, n := range g.Nodes {
			k := n.Domain + "/" + n.OpType
			if uses[k] == nil {
				uses[k] = &use{op: n.OpType, domain: n.Domain, opset: m.Opsets[n.Domain]}
			}
			uses[k].count++
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
	keys := make([]string, 0, len(uses))
	for k := range uses {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	missing := 0
	fmt.Fprintln(tw, "operator\tdomain\topset\tnodes\tsupported\t")
	for _, k := range keys {
		u := uses[k]
		_, ok := probe.Lookup(u.domain, u.op, int(u.opset))
		s := "yes"
		if !ok {
			s = "NO"
			missing++
		}
		dom := u.domain
		if dom == "" {
			dom = "ai.onnx"
		}
		fmt.Fprintf(tw, "%s\t%s\t%d\t%d\t%s\t\n", u.op, dom, u.opset, u.count, s)
	}
	if err := tw.Flush(); err != nil {
		return 2, err
	}
	if missing > 0 {
		fmt.Fprintf(stdout, "\n%d operator(s) of %s are not supported.\n", missing, *model)
		return 1, nil
	}
	fmt.Fprintf(stdout, "\nEvery operator of %s is supported.\n", *model)
	return 0, nil
}
