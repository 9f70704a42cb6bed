package probe

import "github.com/vitals-health/vitals/tensor"

// recycler decides, during RunRecycled, which released values' storage can
// be handed back before the run ends: a value whose storage overlaps no
// value still alive. The values alive are the run's inputs and initializers
// (fixed, for the whole run), the step outputs still to be read (live) and
// the outputs fused steps computed ahead (the run loop's fused map).
type recycler struct {
	fixed []*tensor.Tensor
	live  map[string]*tensor.Tensor
	dead  func(*tensor.Tensor)
}

func newRecycler(env *Scope, dead func(*tensor.Tensor)) *recycler {
	r := &recycler{live: map[string]*tensor.Tensor{}, dead: dead}
	for _, t := range env.vals {
		if t.DType == tensor.Float32 {
			r.fixed = append(r.fixed, t)
		}
	}
	return r
}

// add records a step's float32 outputs as alive.
func (r *recycler) add(outputs []string, env *Scope) {
	for _, name := range outputs {
		if t := env.vals[name]; name != "" && t != nil && t.DType == tensor.Float32 {
			r.live[name] = t
		}
	}
}

// settle takes the values a step released (already gone from live) and
// hands to dead each one whose storage no value alive overlaps, a buffer at
// most once: two released views of one buffer go as one, and released
// values of earlier steps that overlap it are dropped from released (their
// storage is handed back now, and may be handed out again before the run
// ends, so the pool's Recycle after the run must not see them). The others
// are appended to released.
func (r *recycler) settle(gone []*tensor.Tensor, fused map[int]*tensor.Tensor, released []*tensor.Tensor) []*tensor.Tensor {
	var handed []*tensor.Tensor
next:
	for _, t := range gone {
		for _, h := range handed {
			if tensor.Overlap(t, h) {
				continue next // its storage went with h
			}
		}
		if r.overlapsAlive(t, fused) {
			released = append(released, t)
			continue
		}
		kept := released[:0]
		for _, e := range released {
			if !tensor.Overlap(e, t) {
				kept = append(kept, e)
			}
		}
		clear(released[len(kept):])
		released = kept
		handed = append(handed, t)
		r.dead(t)
	}
	return released
}

func (r *recycler) overlapsAlive(t *tensor.Tensor, fused map[int]*tensor.Tensor) bool {
	for _, f := range r.fixed {
		if tensor.Overlap(t, f) {
			return true
		}
	}
	for _, l := range r.live {
		if tensor.Overlap(t, l) {
			return true
		}
	}
	for _, f := range fused {
		if f != nil && tensor.Overlap(t, f) {
			return true
		}
	}
	return false
}
