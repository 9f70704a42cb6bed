package stats

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"sort"
)

// Partial states: a collector's accumulators written out after a run over
// one contiguous range of the sample, and folded into another collector of
// the same model, range after range, so that the collector ends up holding
// what one run over the whole sample would have held (check.Partial and
// check.Merge; the file format around the sections is in check/partial.go).
//
// Every kind of accumulator is one Part in Parts: it writes its state into
// a section (Save) and folds a section read back into a collector (Load,
// which unmarshals and merges in one step). Merging goes in sample order:
// the collector holds the earlier samples, the section the later ones, so
// order-dependent state (the dead-unit trail, a layer's first shape, the
// batch sizes) concatenates. Counts, flags, extremes and histograms merge
// exactly; moments with Chan et al.'s formula (Moments.Merge), the same one
// the run uses between batches.

// Part is the state of one kind of accumulator.
type Part interface {
	// Name names the section (unique; it is written into the file).
	Name() string
	// Save writes the collector's state of this kind.
	Save(c *Collector, e *Enc)
	// Load reads a section written by Save and merges it into c, which
	// holds the samples before the section's.
	Load(c *Collector, d *Dec) error
}

// Parts lists every kind of accumulator a partial state carries, in file
// order. A branch adding an accumulator adds one entry here.
var Parts = []Part{partBatches{}, partLayers{}, partInputs{}, partOutput{}, partQuant{}, partHalf{}, partCoverage{}, partTransformer{}}

// SaveState writes every Part's section of c, in Parts order: a count,
// then per section its name and its length-prefixed bytes.
func (c *Collector) SaveState() ([]byte, error) {
	if err := c.Wait(); err != nil {
		return nil, err
	}
	e := &Enc{}
	e.Uvarint(uint64(len(Parts)))
	for _, p := range Parts {
		s := &Enc{}
		p.Save(c, s)
		e.String(p.Name())
		e.Bytes(s.B)
	}
	return e.B, nil
}

// LoadState merges a state written by SaveState (of a collector of the same
// model, over samples after those c holds) into c.
func (c *Collector) LoadState(b []byte) error {
	d := &Dec{B: b}
	n := d.Uvarint()
	byName := map[string]Part{}
	for _, p := range Parts {
		byName[p.Name()] = p
	}
	for i := uint64(0); i < n && d.Err == nil; i++ {
		name := d.String()
		body := d.Bytes()
		if d.Err != nil {
			break
		}
		p, ok := byName[name]
		if !ok {
			return fmt.Errorf("state section %q is not one this vitals knows", name)
		}
		sd := &Dec{B: body}
		if err := p.Load(c, sd); err != nil {
			return fmt.Errorf("state section %q: %w", name, err)
		}
		if sd.Err != nil {
			return fmt.Errorf("state section %q: %w", name, sd.Err)
		}
		if len(sd.B) != 0 {
			return fmt.Errorf("state section %q: %d bytes left over", name, len(sd.B))
		}
	}
	if d.Err != nil {
		return d.Err
	}
	if len(d.B) != 0 {
		return fmt.Errorf("state: %d bytes left over", len(d.B))
	}
	return nil
}

// BatchRows are the sample counts of the batches the collector has seen, in order.
func (c *Collector) BatchRows() []int { return append([]int(nil), c.batchRows...) }

// --- encoding ---

// Enc appends little-endian values: unsigned varints for counts and
// lengths, zig-zag varints for signed integers, IEEE-754 bits for floats.
type Enc struct{ B []byte }

func (e *Enc) Uvarint(v uint64)  { e.B = binary.AppendUvarint(e.B, v) }
func (e *Enc) Varint(v int64)    { e.B = binary.AppendVarint(e.B, v) }
func (e *Enc) Float(v float64)   { e.B = binary.LittleEndian.AppendUint64(e.B, math.Float64bits(v)) }
func (e *Enc) Float32(v float32) { e.B = binary.LittleEndian.AppendUint32(e.B, math.Float32bits(v)) }
func (e *Enc) Bool(v bool) {
	if v {
		e.B = append(e.B, 1)
	} else {
		e.B = append(e.B, 0)
	}
}
func (e *Enc) Bytes(b []byte) { e.Uvarint(uint64(len(b))); e.B = append(e.B, b...) }
func (e *Enc) String(s string) {
	e.Uvarint(uint64(len(s)))
	e.B = append(e.B, s...)
}
func (e *Enc) Ints(v []int) {
	e.Uvarint(uint64(len(v)))
	for _, x := range v {
		e.Varint(int64(x))
	}
}
func (e *Enc) Moments(m Moments) {
	e.Varint(m.N)
	e.Float(m.Mean)
	e.Float(m.M2)
	e.Float(m.Min)
	e.Float(m.Max)
	e.Varint(m.Zeros)
	e.Varint(m.Nonfinite)
}
func (e *Enc) Hist(h *Histogram) {
	e.Bool(h.Counts != nil)
	if h.Counts == nil {
		return
	}
	e.Varint(int64(h.Exp))
	e.Varint(h.Start)
	e.Float(h.Min)
	e.Float(h.Max)
	e.Uvarint(uint64(len(h.Counts)))
	for _, n := range h.Counts {
		e.Varint(n)
	}
}

// Dec reads what Enc wrote; the first failure sticks in Err and later reads give zeros.
type Dec struct {
	B   []byte
	Err error
}

var errShort = errors.New("state ends early")

func (d *Dec) fail(err error) {
	if d.Err == nil {
		d.Err = err
	}
	d.B = nil
}
func (d *Dec) Uvarint() uint64 {
	v, n := binary.Uvarint(d.B)
	if n <= 0 {
		d.fail(errShort)
		return 0
	}
	d.B = d.B[n:]
	return v
}
func (d *Dec) Varint() int64 {
	v, n := binary.Varint(d.B)
	if n <= 0 {
		d.fail(errShort)
		return 0
	}
	d.B = d.B[n:]
	return v
}

// Len reads a count of items each at least min bytes long, refusing a count the rest cannot hold.
func (d *Dec) Len(min int) int {
	n := d.Uvarint()
	if n > uint64(len(d.B)/max(min, 1)+1) || n > 1<<40 {
		d.fail(fmt.Errorf("count %d exceeds the %d bytes left", n, len(d.B)))
		return 0
	}
	return int(n)
}
func (d *Dec) Float() float64 {
	if len(d.B) < 8 {
		d.fail(errShort)
		return 0
	}
	v := math.Float64frombits(binary.LittleEndian.Uint64(d.B))
	d.B = d.B[8:]
	return v
}
func (d *Dec) Float32() float32 {
	if len(d.B) < 4 {
		d.fail(errShort)
		return 0
	}
	v := math.Float32frombits(binary.LittleEndian.Uint32(d.B))
	d.B = d.B[4:]
	return v
}
func (d *Dec) Bool() bool {
	if len(d.B) < 1 {
		d.fail(errShort)
		return false
	}
	v := d.B[0] != 0
	d.B = d.B[1:]
	return v
}
func (d *Dec) Bytes() []byte {
	n := d.Len(1)
	if d.Err != nil || n > len(d.B) {
		d.fail(errShort)
		return nil
	}
	b := d.B[:n]
	d.B = d.B[n:]
	return b
}
func (d *Dec) String() string { return string(d.Bytes()) }
func (d *Dec) Ints() []int {
	n := d.Len(1)
	var v []int
	for i := 0; i < n && d.Err == nil; i++ {
		v = append(v, int(d.Varint()))
	}
	return v
}
func (d *Dec) Moments() Moments {
	return Moments{N: d.Varint(), Mean: d.Float(), M2: d.Float(), Min: d.Float(), Max: d.Float(), Zeros: d.Varint(), Nonfinite: d.Varint()}
}
func (d *Dec) Hist() Histogram {
	var h Histogram
	if !d.Bool() {
		return h
	}
	e, st := int(d.Varint()), d.Varint()
	h.Min, h.Max = d.Float(), d.Float()
	n := d.Len(1)
	if d.Err != nil {
		return Histogram{}
	}
	if n != HistBins {
		d.fail(fmt.Errorf("histogram of %d bins, want %d", n, HistBins))
		return Histogram{}
	}
	h.Counts = make([]int64, n)
	for i := range h.Counts {
		h.Counts[i] = d.Varint()
	}
	h.setGrid(e, st)
	return h
}

// MergeHist folds histogram b into h. Both grids are power-of-two aligned
// (histGrid): the grid of the union of their ranges is at least as coarse
// as either, and each old bin lies inside one of its bins, so both are
// moved onto it (regrid) and added; the result is the histogram of all
// their values counted on that grid, as one run would have counted them.
func (h *Histogram) MergeHist(b *Histogram) {
	if b.Counts == nil {
		return
	}
	if h.Counts == nil {
		*h = Histogram{Min: b.Min, Max: b.Max, Counts: append([]int64(nil), b.Counts...)}
		h.setGrid(b.Exp, b.Start)
		return
	}
	h.Min, h.Max = math.Min(h.Min, b.Min), math.Max(h.Max, b.Max)
	e, st := histGrid(h.Min, h.Max)
	if e != h.Exp || st != h.Start {
		h.regrid(e, st)
	}
	o := *b
	o.Counts = append([]int64(nil), b.Counts...)
	if e != o.Exp || st != o.Start {
		o.regrid(e, st)
	}
	for i, n := range o.Counts {
		h.Counts[i] += n
	}
}

// --- the parts ---

// partBatches: the sample count and the size of each batch.
type partBatches struct{}

func (partBatches) Name() string { return "batches" }
func (partBatches) Save(c *Collector, e *Enc) {
	e.Varint(int64(c.Samples))
	e.Ints(c.batchRows)
}
func (partBatches) Load(c *Collector, d *Dec) error {
	c.Samples += int(d.Varint())
	c.batchRows = append(c.batchRows, d.Ints()...)
	return nil
}

func saveLayer(e *Enc, la *layerAcc) {
	e.Ints(la.shape)
	e.Moments(la.mom)
	e.Hist(&la.hist)
	e.Varint(int64(la.unitAxis))
	e.Uvarint(uint64(len(la.everPos)))
	for _, p := range la.everPos {
		e.Bool(p)
	}
	e.Uvarint(uint64(len(la.deadTrail)))
	e.Uvarint(uint64(len(la.firstObs)))
	for _, f := range la.firstObs {
		e.Varint(int64(f))
	}
	e.Uvarint(uint64(len(la.unitLo)))
	for u := range la.unitLo {
		e.Float32(la.unitLo[u])
		e.Float32(la.unitHi[u])
	}
	e.Varint(la.sat)
	e.Varint(la.satN)
	e.Uvarint(uint64(len(la.perChan)))
	for _, m := range la.perChan {
		e.Moments(m)
	}
	e.Varint(la.batches)
}

// loadLayer merges a saved layer (later samples) into la.
func loadLayer(d *Dec, la *layerAcc) error {
	shape := d.Ints()
	if la.shape == nil && shape != nil {
		la.shape = shape
	}
	la.mom.Merge(d.Moments())
	h := d.Hist()
	la.hist.MergeHist(&h)
	axis := int(d.Varint())
	units := d.Len(1)
	ever := make([]bool, units)
	for u := range ever {
		ever[u] = d.Bool()
	}
	trail := int(d.Uvarint())
	first := make([]int32, d.Len(1))
	for u := range first {
		first[u] = int32(d.Varint())
	}
	nr := d.Len(8)
	lo, hi := make([]float32, nr), make([]float32, nr)
	for u := 0; u < nr; u++ {
		lo[u], hi[u] = d.Float32(), d.Float32()
	}
	la.sat += d.Varint()
	la.satN += d.Varint()
	pc := make([]Moments, d.Len(8))
	for i := range pc {
		pc[i] = d.Moments()
	}
	la.batches += d.Varint()
	if d.Err != nil {
		return d.Err
	}
	if units > 0 {
		if len(la.everPos) == 0 {
			la.everPos = make([]bool, units)
		}
		if len(la.everPos) != units {
			return fmt.Errorf("layer %q has %d units in one state and %d in another", la.output, len(la.everPos), units)
		}
		la.unitAxis = axis
		// a unit's first positive observation, counted from the start of
		// the merged sample; the trail continues after the one held
		if len(first) == units {
			old := la.firstObs
			if len(old) != units {
				old = make([]int32, units)
				for u := range old {
					old[u] = -1
					if la.everPos[u] { // (not tracked: counts as from the start)
						old[u] = 0
					}
				}
			}
			base := int32(len(la.deadTrail))
			for u := range first {
				if old[u] < 0 && first[u] >= 0 {
					old[u] = base + first[u]
				}
			}
			la.firstObs = old
		}
		for u := range ever {
			la.everPos[u] = la.everPos[u] || ever[u]
		}
		la.notYet = notPositive(la.everPos)
		for j := 0; j < trail; j++ {
			la.deadTrail = append(la.deadTrail, 0)
		}
		la.rebuildTrail()
	}
	if nr > 0 {
		if len(la.unitLo) == 0 {
			la.unitLo, la.unitHi = lo, hi
		} else if len(la.unitLo) != nr {
			return fmt.Errorf("layer %q has %d unit ranges in one state and %d in another", la.output, len(la.unitLo), nr)
		} else {
			for u := range lo {
				la.unitLo[u], la.unitHi[u] = min(la.unitLo[u], lo[u]), max(la.unitHi[u], hi[u])
			}
		}
	}
	if len(pc) > 0 {
		if len(la.perChan) == 0 {
			la.perChan = pc
		} else if len(la.perChan) != len(pc) {
			return fmt.Errorf("%q has %d channels in one state and %d in another", la.output, len(la.perChan), len(pc))
		} else {
			for i := range pc {
				la.perChan[i].Merge(pc[i])
			}
		}
	}
	return nil
}

// markFirst records observation j as the first positive one of the units
// of pending (the units not yet positive before it) that everPos now holds.
func (la *layerAcc) markFirst(pending []int32, j int32) {
	if len(la.firstObs) != len(la.everPos) {
		la.firstObs = make([]int32, len(la.everPos))
		for u := range la.firstObs {
			la.firstObs[u] = -1
		}
	}
	for _, u := range pending {
		if la.everPos[u] && la.firstObs[u] < 0 {
			la.firstObs[u] = j
		}
	}
}

// rebuildTrail recomputes deadTrail[j], the units not yet positive after
// observation j, from firstObs.
func (la *layerAcc) rebuildTrail() {
	if len(la.firstObs) != len(la.everPos) {
		return
	}
	// became[j]: units first positive in observation j
	became := make([]int32, len(la.deadTrail))
	left := int32(len(la.firstObs))
	for _, f := range la.firstObs {
		if f >= 0 && int(f) < len(became) {
			became[f]++
		}
	}
	for j := range la.deadTrail {
		left -= became[j]
		la.deadTrail[j] = left
	}
}

// partLayers: every observed node output, by output name.
type partLayers struct{}

func (partLayers) Name() string { return "layers" }
func (partLayers) Save(c *Collector, e *Enc) {
	e.Uvarint(uint64(len(c.layers)))
	for _, la := range c.layers {
		e.String(la.output)
		saveLayer(e, la)
	}
}
func (partLayers) Load(c *Collector, d *Dec) error {
	n := d.Len(2)
	for i := 0; i < n && d.Err == nil; i++ {
		name := d.String()
		la := c.byOut[name]
		if la == nil {
			return fmt.Errorf("the state has node output %q, which this model does not", name)
		}
		if err := loadLayer(d, la); err != nil {
			return err
		}
	}
	return nil
}

// partInputs: the graph inputs' moments and per-channel moments.
type partInputs struct{}

func (partInputs) Name() string { return "inputs" }
func (partInputs) Save(c *Collector, e *Enc) {
	e.Uvarint(uint64(len(c.inputOrder)))
	for _, name := range c.inputOrder {
		e.String(name)
		saveLayer(e, c.inputs[name])
	}
}
func (partInputs) Load(c *Collector, d *Dec) error {
	n := d.Len(2)
	for i := 0; i < n && d.Err == nil; i++ {
		name := d.String()
		la := c.inputs[name]
		if la == nil {
			return fmt.Errorf("the state has input %q, which this model does not", name)
		}
		if err := loadLayer(d, la); err != nil {
			return err
		}
	}
	return nil
}

// partOutput: the output-health counts and sums.
type partOutput struct{}

func (partOutput) Name() string { return "output" }
func (partOutput) Save(c *Collector, e *Enc) {
	e.Bool(c.out != nil)
	if o := c.out; o != nil {
		e.String(o.name)
		e.Varint(int64(o.classes))
		e.Varint(o.rows)
		e.Varint(o.distRows)
		e.Float(o.sumMaxProb)
		e.Varint(o.labeled)
		e.Varint(o.correct)
		e.Float(o.sumCE)
	}
}
func (partOutput) Load(c *Collector, d *Dec) error {
	if !d.Bool() {
		return nil
	}
	b := outputAcc{name: d.String(), classes: int(d.Varint()), rows: d.Varint(), distRows: d.Varint(),
		sumMaxProb: d.Float(), labeled: d.Varint(), correct: d.Varint(), sumCE: d.Float()}
	if c.out == nil {
		c.out = &outputAcc{name: b.name}
	}
	o := c.out
	if o.name != b.name {
		return fmt.Errorf("output %q in one state, %q in another", o.name, b.name)
	}
	if b.classes != 0 {
		o.classes = b.classes
	}
	o.rows += b.rows
	o.distRows += b.distRows
	o.sumMaxProb += b.sumMaxProb
	o.labeled += b.labeled
	o.correct += b.correct
	o.sumCE += b.sumCE
	return nil
}

// partQuant: each quantizer's clipped and value counts and levels used, in the order newQuantSet lists them.
type partQuant struct{}

func (partQuant) Name() string { return "quant" }
func (partQuant) Save(c *Collector, e *Enc) {
	if c.quant == nil {
		e.Uvarint(0)
		return
	}
	e.Uvarint(uint64(len(c.quant.all)))
	for _, a := range c.quant.all {
		e.String(a.node.Name + "\x00" + a.input)
		e.Varint(a.clipped)
		e.Varint(a.count)
		e.Uvarint(uint64(len(a.used)))
		for _, u := range a.used {
			e.Uvarint(uint64(len(u)))
			for _, b := range u {
				e.Bool(b)
			}
		}
	}
}
func (partQuant) Load(c *Collector, d *Dec) error {
	n := d.Len(3)
	var all []*quantAcc
	if c.quant != nil {
		all = c.quant.all
	}
	if n != len(all) && d.Err == nil {
		return fmt.Errorf("%d quantizers in the state, %d in the model", n, len(all))
	}
	for i := 0; i < n && d.Err == nil; i++ {
		a := all[i]
		if id := d.String(); id != a.node.Name+"\x00"+a.input {
			return fmt.Errorf("quantizer %d is %q in the state, %q in the model", i, id, a.node.Name)
		}
		a.clipped += d.Varint()
		a.count += d.Varint()
		sets := d.Len(1)
		if sets != len(a.used) && d.Err == nil {
			return fmt.Errorf("quantizer %q: %d level sets in the state, %d in the model", a.node.Name, sets, len(a.used))
		}
		for k := 0; k < sets && d.Err == nil; k++ {
			m := d.Len(1)
			if m == 0 {
				continue
			}
			if a.used[k] == nil {
				a.used[k] = make([]bool, m)
			}
			if len(a.used[k]) != m {
				return fmt.Errorf("quantizer %q: %d levels in the state, %d in the model", a.node.Name, m, len(a.used[k]))
			}
			for j := 0; j < m; j++ {
				a.used[k][j] = d.Bool() || a.used[k][j]
			}
		}
	}
	return nil
}

// partHalf: the float16 overflow and subnormal counts.
type partHalf struct{}

func (partHalf) Name() string { return "float16" }
func (partHalf) Save(c *Collector, e *Enc) {
	if c.half == nil {
		e.Uvarint(0)
		return
	}
	names := make([]string, 0, len(c.half.acts))
	for n := range c.half.acts {
		names = append(names, n)
	}
	sort.Strings(names)
	e.Uvarint(uint64(len(names)))
	for _, n := range names {
		a := c.half.acts[n]
		e.String(n)
		e.Varint(a.over)
		e.Varint(a.sub)
		e.Varint(a.n)
	}
}
func (partHalf) Load(c *Collector, d *Dec) error {
	n := d.Len(4)
	for i := 0; i < n && d.Err == nil; i++ {
		name := d.String()
		over, sub, cnt := d.Varint(), d.Varint(), d.Varint()
		if c.half == nil || c.half.acts[name] == nil {
			return fmt.Errorf("the state has float16 activation %q, which this model does not", name)
		}
		a := c.half.acts[name]
		a.over += over
		a.sub += sub
		a.n += cnt
	}
	return nil
}

// partCoverage: the hook calls of every node and the runs of every graph.
type partCoverage struct{}

func (partCoverage) Name() string { return "coverage" }
func (partCoverage) Save(c *Collector, e *Enc) {
	e.Uvarint(uint64(len(c.hits)))
	for _, h := range c.hits {
		e.Varint(h)
	}
	e.Varint(c.Plan.Runs() - c.mainRuns0)
	e.Uvarint(uint64(len(c.runs0)))
	for k, r0 := range c.runs0 {
		e.Varint(c.flat.Subgraphs[k].Runs() - r0)
	}
}
func (partCoverage) Load(c *Collector, d *Dec) error {
	n := d.Len(1)
	if n != len(c.hits) && d.Err == nil {
		return fmt.Errorf("%d nodes in the state, %d in the model", n, len(c.hits))
	}
	for i := 0; i < n && d.Err == nil; i++ {
		c.hits[i] += d.Varint()
	}
	// runs are read as (runs now − runs at the start): lowering the start
	// adds the state's runs
	c.mainRuns0 -= d.Varint()
	k := d.Len(1)
	if k != len(c.runs0) && d.Err == nil {
		return fmt.Errorf("%d subgraphs in the state, %d in the model", k, len(c.runs0))
	}
	for i := 0; i < k && d.Err == nil; i++ {
		c.runs0[i] -= d.Varint()
	}
	return nil
}
