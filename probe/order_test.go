package probe

import (
	"fmt"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/vitals-health/vitals/loader"
)

// sweepOrder is the plain statement of the compiler's order: sweep the
// waiting nodes in file order, taking each whose inputs are known, until a
// sweep takes nothing. (Quadratic; the compiler does the same in O(n log n).)
func sweepOrder(g *loader.Graph) []string {
	known := map[string]bool{}
	for name := range g.Initializers {
		known[name] = true
	}
	for _, in := range g.Inputs {
		known[in.Name] = true
	}
	pending := append([]*loader.Node{}, g.Nodes...)
	var order []string
	for {
		var rest []*loader.Node
		for _, n := range pending {
			ready := true
			for _, in := range n.Inputs {
				if in != "" && !known[in] {
					ready = false
				}
			}
			if !ready {
				rest = append(rest, n)
				continue
			}
			order = append(order, n.Name)
			for _, o := range n.Outputs {
				known[o] = true
			}
		}
		if len(rest) == len(pending) {
			return order
		}
		pending = rest
	}
}

// The compiler's order equals the sweeps' on random graphs whose nodes are
// shuffled, so forward references, diamonds and duplicates all occur.
func TestCompileOrderMatchesSweeps(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	for trial := range 500 {
		n := 1 + rng.IntN(30)
		var nodes []*loader.Node
		for i := range n {
			var ins []string
			for range 1 + rng.IntN(3) {
				switch k := rng.IntN(n + 2); {
				case k == n:
					ins = append(ins, "x")
				case k == n+1:
					ins = append(ins, "")
				default:
					ins = append(ins, fmt.Sprint("v", k))
				}
			}
			nodes = append(nodes, &loader.Node{Name: fmt.Sprint("n", i), OpType: "Sum", Inputs: ins, Outputs: []string{fmt.Sprint("v", i)}})
		}
		rng.Shuffle(len(nodes), func(i, j int) { nodes[i], nodes[j] = nodes[j], nodes[i] })
		m := graphModel(nil, nil, nodes...)
		want := sweepOrder(m.Graph)
		p, err := Compile(m)
		if len(want) < n {
			if err == nil {
				t.Fatalf("trial %d: compiled a graph the sweeps cannot order", trial)
			}
			continue
		}
		if err != nil {
			t.Fatalf("trial %d: %v", trial, err)
		}
		for i, s := range p.Steps {
			if s.Node.Name != want[i] {
				t.Fatalf("trial %d: step %d is %s, sweeps give %s (%v)", trial, i, s.Node.Name, want[i], want)
			}
		}
	}
}

// A long chain listed backwards compiles in well under a second (the
// sweeps would take one pass per node: 10^10 steps for 100,000 nodes).
func TestCompileBackwardsChain(t *testing.T) {
	const n = 100_000
	nodes := make([]*loader.Node, 0, n)
	for i := n - 1; i >= 0; i-- {
		in := "x"
		if i > 0 {
			in = fmt.Sprint("v", i-1)
		}
		nodes = append(nodes, &loader.Node{Name: fmt.Sprint("n", i), OpType: "Relu", Inputs: []string{in}, Outputs: []string{fmt.Sprint("v", i)}})
	}
	start := time.Now()
	p, err := Compile(graphModel(nil, []string{fmt.Sprint("v", n-1)}, nodes...))
	if err != nil {
		t.Fatal(err)
	}
	if p.Steps[0].Node.Name != "n0" || p.Depth[n-1] != n {
		t.Errorf("first step %s, last depth %d", p.Steps[0].Node.Name, p.Depth[n-1])
	}
	t.Logf("%d nodes in %v", n, time.Since(start))
}
