// Command hookcost measures what the per-node statistics cost: it runs a
// model over a sample in batches with (1) a hook that does nothing and
// (2) check.Check, what `vitals check` runs (statistics hook, read-ahead,
// recycling, the checks at the end), and prints
// the best-of-N time per image of each and the overhead, the first batch (a
// warm-up) left out. With -ops it also prints the time per operator type
// (hook off, buffers recycled, convolutions split by kind). With -floor it
// also times (3) a hook that only takes each node output's moments on a
// worker, as the collector queues them (stats.FastMoments: sum, sum of
// squares, extremes and counts, no histogram): the least any statistics
// pass reading the outputs after the kernels wrote them could cost.
//
//	go run ./bench/hookcost -model M.onnx -data X.npy [-batch 8] [-samples 64] [-reps 3] [-ops] [-floor]
package main

import (
	"context"
	"flag"
	"fmt"
	"os"
	"runtime/pprof"
	"sort"
	"sync"
	"sync/atomic"
	"syscall"
	"time"

	"github.com/vitals-health/vitals/check"
	"github.com/vitals-health/vitals/gemm"
	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/stats"
	"github.com/vitals-health/vitals/tensor"
)

func main() {
	modelPath := flag.String("model", "", "ONNX model")
	dataPath := flag.String("data", "", ".npy sample (first axis = items)")
	batch := flag.Int("batch", 8, "batch size")
	samples := flag.Int("samples", 64, "items to run")
	reps := flag.Int("reps", 3, "repetitions (best is reported)")
	ops := flag.Bool("ops", false, "print time per operator type")
	prof := flag.String("cpuprofile", "", "write a CPU profile of the whole run")
	kernel := flag.Bool("kernel", false, "print the SGEMM micro-kernel in use and exit")
	flag.BoolVar(&outBytes, "outputs", false, "also print the bytes of node outputs per item (what the statistics read)")
	flag.BoolVar(&floor, "floor", false, "also time a hook that only takes each output's moments")
	flag.IntVar(&topNodes, "nodes", 0, "with -ops, also print the N slowest nodes (time per image, output shape)")
	flag.BoolVar(&terse, "terse", false, "print only the two times (ms/image) separated by \" / \"")
	flag.Parse()
	if *kernel {
		fmt.Println(gemm.KernelName())
		return
	}
	if *prof != "" {
		f, err := os.Create(*prof)
		if err != nil {
			fmt.Fprintln(os.Stderr, "hookcost:", err)
			os.Exit(2)
		}
		defer f.Close()
		if err := pprof.StartCPUProfile(f); err != nil {
			fmt.Fprintln(os.Stderr, "hookcost:", err)
			os.Exit(2)
		}
		defer pprof.StopCPUProfile()
	}
	if err := run(*modelPath, *dataPath, *batch, *samples, *reps, *ops); err != nil {
		pprof.StopCPUProfile()
		fmt.Fprintln(os.Stderr, "hookcost:", err)
		os.Exit(2)
	}
}

func run(modelPath, dataPath string, batch, samples, reps int, ops bool) error {
	m, err := loader.LoadModel(modelPath)
	if err != nil {
		return err
	}
	p, err := probe.Compile(m)
	if err != nil {
		return err
	}
	// the values vitals check leaves unwritten (inside composite
	// activations, dense layers' products before their bias) are left
	// unwritten here too
	skip := stats.NewCollector(m, p).Unobserved()
	x, err := loader.ReadNpy(dataPath)
	if err != nil {
		return err
	}
	samples = min(samples, x.Shape[0])
	item := x.Size() / x.Shape[0]
	// rows lo…hi−1 of the sample as a new tensor (float32 data, or int64 token ids)
	rows := func(lo, hi int) *tensor.Tensor {
		shape := append([]int{hi - lo}, x.Shape[1:]...)
		switch d := x.Data.(type) {
		case []int64:
			return tensor.From(append([]int64{}, d[lo*item:hi*item]...), shape...)
		default:
			return tensor.From(append([]float32{}, x.F32()[lo*item:hi*item]...), shape...)
		}
	}
	var batches []map[string]*tensor.Tensor
	for s := 0; s+batch <= samples; s += batch {
		batches = append(batches, map[string]*tensor.Tensor{m.Graph.Inputs[0].Name: rows(s, s+batch)})
	}
	if len(batches) == 0 {
		return fmt.Errorf("fewer than %d samples", batch)
	}
	n := len(batches) * batch
	empty := func(*loader.Node, []*tensor.Tensor) error { return nil }
	cm, err := check.Compile(m, check.LoadOptions{})
	if err != nil {
		return err
	}
	// the sample check.Check reads: the same n items, cut at the same size
	sample := check.Sample{Arrays: map[string]*tensor.Tensor{m.Graph.Inputs[0].Name: rows(0, n)}, Batch: batch}
	timeIt := func(mode int) (time.Duration, error) {
		timed := n
		if len(batches) > 1 {
			timed -= batch
		}
		if mode == 1 {
			// the first batch is a warm-up, untimed when there are others
			var t0 time.Time
			o := check.Options{Progress: func(pr check.Progress) {
				if pr.Done == batch {
					t0 = time.Now()
				}
			}}
			start := time.Now()
			if _, err := check.Check(context.Background(), cm, sample, o); err != nil {
				return 0, err
			}
			if len(batches) == 1 {
				t0 = start
			}
			return time.Since(t0) / time.Duration(timed), nil
		}
		best := time.Duration(1 << 62)
		for r := 0; r < 1; r++ {
			hook := probe.Hook(empty)
			var mo *momentsOnly
			switch mode {
			case 2:
				mo = newMomentsOnly()
				defer mo.close()
				hook = mo.hook
			}
			// activation buffers recycled within and from batch to batch, as
			// vitals check does
			pool := tensor.NewPool(1 << 30)
			arena := &tensor.Arena{Pool: pool}
			dead := pool.Put
			if mode == 2 {
				dead = mo.afterRead(pool.Put)
			}
			// the first batch is a warm-up (the pool's buffers first-touched,
			// each histogram's grid found by a second pass), untimed when
			// there are others: the figures stand for a long run
			t0 := time.Now()
			for i, b := range batches {
				if i == 1 {
					t0 = time.Now()
				}
				outs, released, err := p.RunRecycled(arena, b, hook, dead, skip)
				if err != nil {
					return 0, err
				}
				if mo != nil {
					mo.wait()
				}
				keep := []*tensor.Tensor{b[m.Graph.Inputs[0].Name]}
				for _, t := range outs {
					keep = append(keep, t)
				}
				pool.Recycle(released, keep)
			}
			best = min(best, time.Since(t0))
		}
		return best / time.Duration(timed), nil
	}
	// warm-up (packs the weights)
	if _, err := p.Run(batches[0], nil); err != nil {
		return err
	}
	modes := 2
	if floor {
		modes = 3
	}
	best := make([]time.Duration, modes)
	for i := range best {
		best[i] = 1 << 62
	}
	// alternate the modes so load changes hit both alike
	cpu := make([]time.Duration, modes)
	for i := range cpu {
		cpu[i] = 1 << 62
	}
	for r := 0; r < reps; r++ {
		for mode := range best {
			c0 := cpuTime()
			d, err := timeIt(mode)
			if err != nil {
				return err
			}
			best[mode] = min(best[mode], d)
			cpu[mode] = min(cpu[mode], (cpuTime()-c0)/time.Duration(n))
		}
	}
	if outBytes {
		var total int64
		count := func(_ *loader.Node, outs []*tensor.Tensor) error {
			for _, t := range outs {
				if t != nil {
					total += int64(t.Size()) * 4
				}
			}
			return nil
		}
		if _, err := p.Run(batches[0], count); err != nil {
			return err
		}
		fmt.Printf("node outputs: %.1f MB per item\n", float64(total)/float64(batch)/1e6)
	}
	off, on := best[0], best[1]
	if terse {
		fmt.Printf("%.3g / %.3g (+%.0f%%)", ms(off), ms(on), 100*(float64(on)/float64(off)-1))
		if floor {
			fmt.Printf(" / moments only %.3g (+%.0f%%)", ms(best[2]), 100*(float64(best[2])/float64(off)-1))
		}
		fmt.Println()
		return nil
	}
	fmt.Printf("%s: batch %d, %d images, best of %d: empty hook %.2f ms/image; statistics hook %.2f ms/image (+%.1f%%)\n",
		modelPath, batch, n, reps, ms(off), ms(on), 100*(float64(on)/float64(off)-1))
	if floor {
		fmt.Printf("moments-only hook %.2f ms/image (+%.1f%%)\n", ms(best[2]), 100*(float64(best[2])/float64(off)-1))
	}
	// CPU time (user+system, all batches) depends far less than wall time
	// on what else the machine runs: the statistics' own work per image
	fmt.Printf("CPU time per image (all batches): empty hook %.2f ms; statistics hook %.2f ms (+%.2f ms)", ms(cpu[0]), ms(cpu[1]), ms(cpu[1]-cpu[0]))
	if floor {
		fmt.Printf("; moments-only hook %.2f ms (+%.2f ms)", ms(cpu[2]), ms(cpu[2]-cpu[0]))
	}
	fmt.Println()
	if ops {
		byOp := map[string]time.Duration{}
		byNode := map[*loader.Node]time.Duration{}
		shapes := map[*loader.Node][]int{}
		last := time.Now()
		hook := func(nd *loader.Node, outs []*tensor.Tensor) error {
			now := time.Now()
			byOp[opKind(nd)] += now.Sub(last)
			if topNodes > 0 {
				byNode[nd] += now.Sub(last)
				if len(outs) > 0 && outs[0] != nil {
					shapes[nd] = append(shapes[nd][:0], outs[0].Shape...)
				}
			}
			last = now
			return nil
		}
		// buffers recycled as in the timed runs (the hook reads nothing after
		// it returns); the first round warms them
		pool := tensor.NewPool(1 << 30)
		arena := &tensor.Arena{Pool: pool}
		for r := 0; r < 2; r++ {
			clear(byOp)
			clear(byNode)
			for _, b := range batches {
				last = time.Now()
				outs, released, err := p.RunRecycled(arena, b, hook, pool.Put, skip)
				if err != nil {
					return err
				}
				keep := []*tensor.Tensor{b[m.Graph.Inputs[0].Name]}
				for _, t := range outs {
					keep = append(keep, t)
				}
				pool.Recycle(released, keep)
			}
		}
		type kv struct {
			op string
			d  time.Duration
		}
		var list []kv
		for k, v := range byOp {
			list = append(list, kv{k, v})
		}
		sort.Slice(list, func(i, j int) bool { return list[i].d > list[j].d })
		for _, e := range list {
			fmt.Printf("  %-22s %8.2f ms/image\n", e.op, ms(e.d/time.Duration(n)))
		}
		type nd struct {
			n *loader.Node
			d time.Duration
		}
		var nodes []nd
		for k, v := range byNode {
			nodes = append(nodes, nd{k, v})
		}
		sort.Slice(nodes, func(i, j int) bool { return nodes[i].d > nodes[j].d })
		for i, e := range nodes {
			if i == topNodes {
				break
			}
			fmt.Printf("  %-22s %8.3f ms/image  %-24s %v\n", opKind(e.n), ms(e.d/time.Duration(n)), e.n.Name, shapes[e.n])
		}
	}
	return nil
}

var terse, outBytes, floor bool

// topNodes is -nodes: how many of the slowest nodes -ops lists
var topNodes int

// momentsOnly is the -floor hook: each float32 node output's moments
// (stats.FastMoments), taken on the calling goroutine for small tensors and
// on one worker for the others, as the collector does (see
// stats.Collector.queue), with at most 4 tensors waiting.
type momentsOnly struct {
	jobs chan []float32
	wg   sync.WaitGroup
	// sums of the means, so that nothing is optimised away: one per goroutine
	sink, sinkW float64
	// tensors queued and done, and dead tensors waiting for the worker to
	// reach the count queued when they died (as Collector.AfterObserved)
	sent    int64
	handled atomic.Int64
	dead    tensor.Deferred
}

func newMomentsOnly() *momentsOnly {
	mo := &momentsOnly{jobs: make(chan []float32, 4)}
	go func() {
		for x := range mo.jobs {
			mo.sinkW += stats.FastMoments(x).Mean
			mo.handled.Add(1)
			mo.wg.Done()
		}
	}()
	return mo
}

// afterRead is the run's dead-value function: t goes to put once the worker
// has read every tensor queued before t died.
func (mo *momentsOnly) afterRead(put func(*tensor.Tensor)) func(*tensor.Tensor) {
	mo.dead.Put = put
	return func(t *tensor.Tensor) {
		mo.dead.Add(t, mo.sent)
		mo.dead.PassOn(mo.handled.Load())
	}
}

func (mo *momentsOnly) hook(_ *loader.Node, outs []*tensor.Tensor) error {
	for _, t := range outs {
		if t == nil {
			continue
		}
		x, ok := t.Data.([]float32)
		if !ok {
			continue
		}
		if len(x) <= 1<<14 {
			mo.sink += stats.FastMoments(x).Mean
			continue
		}
		mo.wg.Add(1)
		mo.sent++
		mo.jobs <- x
	}
	return nil
}

// wait returns once every queued tensor is done (before buffers are recycled).
func (mo *momentsOnly) wait() { mo.wg.Wait(); mo.dead.PassOn(mo.sent) }

func (mo *momentsOnly) close() { mo.wg.Wait(); close(mo.jobs) }

func ms(d time.Duration) float64 { return float64(d) / 1e6 }

// opKind is a node's operator type, convolutions split into depthwise
// (group > 1), 1×1 and the rest by their kernel shape.
func opKind(n *loader.Node) string {
	if n.OpType != "Conv" {
		return n.OpType
	}
	kind := "Conv"
	if g := n.Attrs["group"]; g != nil && g.I > 1 {
		kind += " grouped"
	}
	if k := n.Attrs["kernel_shape"]; k != nil {
		kind += fmt.Sprintf(" %v", k.Ints)
	}
	return kind
}

// cpuTime is the process's user plus system CPU time so far.
func cpuTime() time.Duration {
	var u syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &u); err != nil {
		return 0
	}
	return time.Duration(u.Utime.Nano() + u.Stime.Nano())
}
