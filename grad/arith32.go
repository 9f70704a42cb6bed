package grad

// Add, Sub and Mul with a float32 G (grad32.go).

// addSub32: an input of the output's shape that is float32 takes G (input
// 0 of Add and Sub: G's buffer itself) or −G in float32; a broadcast input
// or a float64 one gets its gradient summed in float64.
func addSub32(o *Op, sub bool) {
	g := o.G32(0)
	Y := o.Out[0]
	for i := 0; i < 2; i++ {
		if !o.Needs(i) {
			continue
		}
		neg := sub && i == 1
		sh := o.In[i].Shape
		if sameShape(sh, Y.Shape) && o.want32(i) {
			var gi []float32
			if i == 0 {
				gi = o.InPlace32(0)
			} else {
				gi = o.GradFull32(i)
			}
			switch {
			case len(gi) == 0 || &gi[0] == &g[0]: // G itself: nothing to write
			case !neg: // in parts on the workers: a serial copy waits on memory
				split(len(g), func(lo, hi int) { copy(gi[lo:hi], g[lo:hi]) })
			default:
				split(len(g), func(lo, hi int) {
					for k := lo; k < hi; k++ {
						gi[k] = -g[k]
					}
				})
			}
			continue
		}
		s := 1.0
		if neg {
			s = -1
		}
		gi := o.Grad(i)
		if sameShape(sh, Y.Shape) {
			for k, v := range g {
				gi[k] = s * float64(v)
			}
			continue
		}
		m := bcastMap(sh, Y.Shape)
		for k, v := range g {
			gi[m[k]] += s * float64(v)
		}
	}
}

// mul32 is mulF32 (float32 inputs, at most one broadcast over trailing
// axes) with a float32 G and float32 gradients for both inputs; it reports
// false (nothing done) otherwise.
func mul32(o *Op) bool {
	A, B, Y := o.In[0], o.In[1], o.Out[0]
	a, ok1 := A.Data.([]float32)
	b, ok2 := B.Data.([]float32)
	if !ok1 || !ok2 {
		return false
	}
	for i := 0; i < 2; i++ {
		if o.Needs(i) && !o.want32(i) {
			return false
		}
	}
	la, okA := trailingRepeat(A.Shape, Y.Shape)
	lb, okB := trailingRepeat(B.Shape, Y.Shape)
	if !okA || !okB || (la > 1 && lb > 1) {
		return false
	}
	g := o.G32(0)
	if len(g) != Y.Size() {
		return false
	}
	fi, ri, f, r, L := 0, 1, a, b, lb // the full input first
	if la > 1 {
		fi, ri, f, r, L = 1, 0, b, a, la
	}
	gr := o.Grad32(ri)
	// the full input's gradient may take G's buffer: the repeated one's
	// sums read G first, block by block
	var gf []float32
	if fi == 0 {
		gf = o.InPlace32(0)
	} else {
		gf = o.GradFull32(1)
	}
	if L == 1 { // same shapes
		for k, v := range g {
			fv, rv := f[k], r[k]
			if gr != nil {
				gr[k] = float32(float64(v) * float64(fv))
			}
			if gf != nil {
				gf[k] = float32(float64(v) * float64(rv))
			}
		}
		return true
	}
	split(len(g), func(lo, hi int) {
		for j := (lo + L - 1) / L; j < len(r) && j*L < hi; j++ {
			blk := g[j*L : (j+1)*L]
			if gr != nil {
				fb := f[j*L : (j+1)*L]
				s := 0.0
				for k, v := range blk {
					s += float64(v) * float64(fb[k])
				}
				gr[j] += float32(s)
			}
			if gf != nil {
				rv := float64(r[j])
				d := gf[j*L : (j+1)*L]
				for k, v := range blk {
					d[k] = float32(float64(v) * rv)
				}
			}
		}
	})
	return true
}
