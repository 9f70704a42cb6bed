// Package probe compiles an ONNX graph into an execution plan and runs it on
// the CPU, calling a hook with every node's outputs as soon as the node has run.
// Operator kernels live one family per file and register themselves here.
package probe

import (
	"fmt"
	"sort"
)

// Kernel computes one node: it reads c.In and sets every c.Out it produces.
type Kernel func(c *Call) error

type version struct {
	since int
	k     Kernel
}

type opKey struct{ domain, op string }

var registry = map[opKey][]version{}

// Register adds a kernel for (domain, op) valid from opset version since
// until the next registered version. The default domain is "".
func Register(domain, op string, since int, k Kernel) {
	key := opKey{domain, op}
	registry[key] = append(registry[key], version{since, k})
	sort.Slice(registry[key], func(i, j int) bool { return registry[key][i].since < registry[key][j].since })
}

// reg registers a default-domain kernel at several since-versions (one entry per version that changed semantics).
func reg(op string, k Kernel, since ...int) {
	if len(since) == 0 {
		since = []int{1}
	}
	for _, s := range since {
		Register("", op, s, k)
	}
}

// Lookup returns the kernel with the highest since-version not above opset.
func Lookup(domain, op string, opset int) (Kernel, bool) {
	vs := registry[opKey{normDomain(domain), op}]
	for i := len(vs) - 1; i >= 0; i-- {
		if vs[i].since <= opset {
			return vs[i].k, true
		}
	}
	return nil, false
}

func normDomain(d string) string {
	if d == "ai.onnx" {
		return ""
	}
	return d
}

// OpInfo describes one supported operator for `vitals ops`.
type OpInfo struct {
	Domain   string
	Op       string
	Versions []int // since-versions registered
}

// Ops lists every registered operator, sorted by domain then name.
func Ops() []OpInfo {
	var out []OpInfo
	for k, vs := range registry {
		oi := OpInfo{Domain: k.domain, Op: k.op}
		for _, v := range vs {
			oi.Versions = append(oi.Versions, v.since)
		}
		out = append(out, oi)
	}
	sort.Slice(out, func(i, j int) bool {
		if out[i].Domain != out[j].Domain {
			return out[i].Domain < out[j].Domain
		}
		return out[i].Op < out[j].Op
	})
	return out
}

// Range renders the opsets the operator runs at as "7+": from its oldest
// registered since-version on, open-ended (Lookup picks, for a model's
// opset, the newest since-version not above it). Empty when none is registered.
func (o OpInfo) Range() string {
	if len(o.Versions) == 0 {
		return ""
	}
	return fmt.Sprintf("%d+", o.Versions[0])
}
