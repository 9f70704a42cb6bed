package probe

import (
	"fmt"

	"github.com/vitals-health/vitals/tensor"
)

// Convolution: Conv (im2col + GEMM) and ConvTranspose (GEMM + col2im), 1-D to
// 3-D (any spatial rank works), with groups, dilations, strides, pads and auto_pad.

func init() {
	reg("Conv", convKernel, 1, 11)
	reg("ConvTranspose", convTransposeKernel, 1, 11)
}

// convGeom is the spatial geometry shared by Conv, ConvTranspose and the pools.
type convGeom struct {
	in, k, out     []int // spatial sizes of the input, kernel window and output
	strides, dil   []int
	padBeg, padEnd []int
}

// convAttrs reads kernel_shape (default kshape), strides, dilations and pads
// for nd spatial dimensions, checking their lengths and values.
func convAttrs(c *Call, nd int, kshape []int) (g convGeom, err error) {
	g.k = kshape
	if ks := c.Ints("kernel_shape"); ks != nil {
		g.k = ks
	}
	if g.k == nil {
		return g, fmt.Errorf("kernel_shape is required")
	}
	g.strides, g.dil = c.Ints("strides"), c.Ints("dilations")
	if g.strides == nil {
		g.strides = convOnes(nd)
	}
	if g.dil == nil {
		g.dil = convOnes(nd)
	}
	pads := c.Ints("pads")
	if pads == nil {
		pads = make([]int, 2*nd)
	}
	if len(g.k) != nd || len(g.strides) != nd || len(g.dil) != nd || len(pads) != 2*nd {
		return g, fmt.Errorf("kernel_shape %v, strides %v, dilations %v, pads %v do not fit %d spatial dimensions", g.k, g.strides, g.dil, pads, nd)
	}
	for i := 0; i < nd; i++ {
		if g.k[i] < 1 || g.strides[i] < 1 || g.dil[i] < 1 || pads[i] < 0 || pads[nd+i] < 0 {
			return g, fmt.Errorf("bad kernel_shape %v, strides %v, dilations %v or pads %v", g.k, g.strides, g.dil, pads)
		}
	}
	g.padBeg, g.padEnd = pads[:nd], pads[nd:]
	return g, nil
}

func convOnes(n int) []int {
	s := make([]int, n)
	for i := range s {
		s[i] = 1
	}
	return s
}

// convForwardOut fills g.out for a forward window op (Conv, pools):
// out = floor((in + pads − ((k−1)·d + 1)) / s) + 1, ceil instead of floor
// with ceilMode; auto_pad SAME_* makes out = ceil(in / s) and splits the
// needed padding (the odd cell goes to the end for SAME_UPPER, to the start
// for SAME_LOWER); VALID means no padding.
func convForwardOut(g *convGeom, autoPad string, ceilMode bool) error {
	nd := len(g.in)
	g.out = make([]int, nd)
	for i := 0; i < nd; i++ {
		span := (g.k[i]-1)*g.dil[i] + 1
		switch autoPad {
		case "SAME_UPPER", "SAME_LOWER":
			o := (g.in[i] + g.strides[i] - 1) / g.strides[i]
			total := max(0, (o-1)*g.strides[i]+span-g.in[i])
			small := total / 2
			if autoPad == "SAME_UPPER" {
				g.padBeg[i], g.padEnd[i] = small, total-small
			} else {
				g.padBeg[i], g.padEnd[i] = total-small, small
			}
			g.out[i] = o
			continue
		case "VALID":
			g.padBeg[i], g.padEnd[i] = 0, 0
		case "NOTSET", "":
		default:
			return fmt.Errorf("unknown auto_pad %q", autoPad)
		}
		num := g.in[i] + g.padBeg[i] + g.padEnd[i] - span
		if num < 0 {
			return fmt.Errorf("window %v (dilations %v) is larger than the padded input %v", g.k, g.dil, g.in)
		}
		o := num/g.strides[i] + 1
		if ceilMode && num%g.strides[i] != 0 {
			o++
			// a last window that would start inside the end padding is dropped
			if (o-1)*g.strides[i] >= g.in[i]+g.padBeg[i] {
				o--
			}
		}
		g.out[i] = o
	}
	return nil
}

// convPads copies the pads so auto_pad can overwrite them per call.
func (g *convGeom) clonePads() {
	g.padBeg = append([]int{}, g.padBeg...)
	g.padEnd = append([]int{}, g.padEnd...)
}

// convCropOn enables convCropTaps (tests turn it off for a reference).
var convCropOn = true

// convUseReference routes float32 convolutions through the generic path
// below (im2col + linGemmT) instead of convFastF32; tests flip it.
var convUseReference = false

// convColBudget bounds the im2col buffer (elements) of one Conv call.
const convColBudget = 1 << 21

// convTables gives, per spatial dimension d, the image coordinate touched by
// kernel tap kd at window position p: p·s − padBeg + kd·dil, or −1 outside.
func convTables(g *convGeom, img, pos []int) [][]int {
	tabs := make([][]int, len(img))
	for d := range img {
		t := make([]int, g.k[d]*pos[d])
		for kd := 0; kd < g.k[d]; kd++ {
			for p := 0; p < pos[d]; p++ {
				x := p*g.strides[d] - g.padBeg[d] + kd*g.dil[d]
				if x < 0 || x >= img[d] {
					x = -1
				}
				t[kd*pos[d]+p] = x
			}
		}
		tabs[d] = t
	}
	return tabs
}

// convWalk moves data between images (channels × img) and a column matrix
// (channels·K rows × prod(pos) columns): im2col copies image values into the
// columns (zero outside the image); with scatter it adds the columns into the
// images instead (col2im). Only the column block of segments
// [seg0, seg0+segs) is touched, a segment being one run of the last position
// axis; the column matrix is then segs·pos[last] wide.
func convWalk[T Number](col, img []T, channels int, g *convGeom, imgShape, pos []int, scatter bool, seg0, segs int) {
	nd := len(imgShape)
	tabs := convTables(g, imgShape, pos)
	imgStr := tensor.Strides(imgShape)
	imgSize := 1
	for _, d := range imgShape {
		imgSize *= d
	}
	K := 1
	for _, d := range g.k {
		K *= d
	}
	last := nd - 1
	inner := pos[last]
	P := segs * inner
	kk := make([]int, nd)
	pp := make([]int, nd)
	row := 0
	for ch := 0; ch < channels; ch++ {
		im := img[ch*imgSize : (ch+1)*imgSize]
		for kp := 0; kp < K; kp++ {
			// kernel tap coordinates of kp
			r := kp
			for d := last; d >= 0; d-- {
				kk[d] = r % g.k[d]
				r /= g.k[d]
			}
			crow := col[row*P : (row+1)*P]
			lastTab := tabs[last][kk[last]*inner : (kk[last]+1)*inner]
			r = seg0
			for d := last - 1; d >= 0; d-- {
				pp[d] = r % pos[d]
				r /= pos[d]
			}
			for o := 0; o < P; o += inner {
				seg := crow[o : o+inner]
				base, ok := 0, true
				for d := 0; d < last; d++ {
					x := tabs[d][kk[d]*pos[d]+pp[d]]
					if x < 0 {
						ok = false
						break
					}
					base += x * imgStr[d]
				}
				switch {
				case !ok && !scatter:
					clear(seg)
				case !ok:
				case scatter:
					for j, x := range lastTab {
						if x >= 0 {
							im[base+x] += seg[j]
						}
					}
				default:
					for j, x := range lastTab {
						if x >= 0 {
							seg[j] = im[base+x]
						} else {
							seg[j] = 0
						}
					}
				}
				for d := last - 1; d >= 0; d-- {
					pp[d]++
					if pp[d] < pos[d] {
						break
					}
					pp[d] = 0
				}
			}
			row++
		}
	}
}

// convKernel: Y[n, m, o] = B[m] + Σ_{c∈group(m), t} W[m, c, t] · X[n, c, o·s − padBeg + t·d].
func convKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, w, b := c.In[0], c.In[1], c.Input(2)
	var out *tensor.Tensor
	var err error
	switch x.Data.(type) {
	case []float32:
		out, err = convRun[float32](c, x, w, b)
	case []float64:
		out, err = convRun[float64](c, x, w, b)
	default:
		return fmt.Errorf("Conv does not support %v", x.DType)
	}
	if err != nil {
		return err
	}
	c.Set(0, out)
	return nil
}

func convRun[T Float](c *Call, x, w, b *tensor.Tensor) (*tensor.Tensor, error) {
	if x.Rank() < 3 || w.Rank() != x.Rank() {
		return nil, fmt.Errorf("Conv needs X of rank ≥ 3 and W of the same rank, got %v and %v", x.Shape, w.Shape)
	}
	if w.DType != x.DType || b != nil && b.DType != x.DType {
		return nil, fmt.Errorf("input types differ")
	}
	nd := x.Rank() - 2
	N, C, M := x.Shape[0], x.Shape[1], w.Shape[0]
	group := int(c.Int("group", 1))
	if group < 1 || C%group != 0 || M%group != 0 || w.Shape[1]*group != C {
		return nil, fmt.Errorf("X %v, W %v do not fit group %d", x.Shape, w.Shape, group)
	}
	if b != nil && b.Size() != M {
		return nil, fmt.Errorf("bias of shape %v, want %d values", b.Shape, M)
	}
	g, err := convAttrs(c, nd, w.Shape[2:])
	if err != nil {
		return nil, err
	}
	for i := range g.k {
		if g.k[i] != w.Shape[2+i] {
			return nil, fmt.Errorf("kernel_shape %v does not match W %v", g.k, w.Shape)
		}
	}
	g.in = x.Shape[2:]
	g.clonePads()
	if err := convForwardOut(&g, c.Str("auto_pad", "NOTSET"), false); err != nil {
		return nil, err
	}
	outShape := append([]int{N, M}, g.out...)
	if _, err := tensor.NumElements(outShape); err != nil {
		return nil, err
	}
	isF32 := x.DType == tensor.Float32 && !convUseReference
	var out *tensor.Tensor
	if isF32 {
		out = c.Arena().NewUninit(x.DType, outShape) // convFastF32 writes every element
	} else {
		out = c.Arena().New(x.DType, outShape)
	}
	wConst := c.isInitializer(1)
	if isF32 && convCropOn {
		if ng, nw, ok := convCropTaps(c, w, &g); ok {
			g, w = ng, nw
		}
	}
	xd, wd, yd := x.Data.([]T), w.Data.([]T), out.Data.([]T)
	Cg, Mg := C/group, M/group
	K, P, inSize := 1, 1, 1
	for i := 0; i < nd; i++ {
		K *= g.k[i]
		P *= g.out[i]
		inSize *= g.in[i]
	}
	// A 1×1 kernel with unit strides and no padding reads X as the column matrix.
	direct := K == 1 && P == inSize
	for i := 0; i < nd && direct; i++ {
		direct = g.strides[i] == 1 && g.padBeg[i] == 0
	}
	if xf, ok := any(xd).([]float32); ok && isF32 {
		var bd []float32
		if b != nil {
			bd = b.F32()
		}
		convF32WithAct(&convF32Args{c: c, w: w, wConst: wConst, xd: xf, wd: any(wd).([]float32), bd: bd, yd: any(yd).([]float32),
			N: N, C: C, M: M, group: group, Cg: Cg, Mg: Mg, K: K, P: P, inSize: inSize, g: &g, direct: direct}, outShape)
		return out, nil
	}
	// The column matrix is built in blocks of whole output rows so that it
	// stays within convColBudget elements however large the image.
	inner := g.out[nd-1]
	segTotal, chunk := 0, 0
	var col []T
	if !direct && P > 0 {
		segTotal = P / inner
		chunk = max(1, min(segTotal, convColBudget/max(1, Cg*K*inner)))
		col = make([]T, Cg*K*chunk*inner)
	}
	for n := 0; n < N; n++ {
		for gi := 0; gi < group; gi++ {
			xg := xd[(n*C+gi*Cg)*inSize : (n*C+(gi+1)*Cg)*inSize]
			yg := yd[(n*M+gi*Mg)*P : (n*M+(gi+1)*Mg)*P]
			wg := wd[gi*Mg*Cg*K:]
			if direct {
				linGemmT(false, false, Mg, P, Cg*K, 1, wg, max(Cg*K, 1), xg, max(P, 1), 0, yg, max(P, 1))
				continue
			}
			for s0 := 0; s0 < segTotal; s0 += chunk {
				sn := min(chunk, segTotal-s0)
				convWalk(col, xg, Cg, &g, g.in, g.out, false, s0, sn)
				linGemmT(false, false, Mg, sn*inner, Cg*K, 1, wg, max(Cg*K, 1), col, max(sn*inner, 1), 0, yg[s0*inner:], max(P, 1))
			}
		}
	}
	if b != nil {
		convAddBias(yd, b.Data.([]T), N, M, P)
	}
	return out, nil
}

func convAddBias[T Number](y, bias []T, n, m, p int) {
	for i := 0; i < n; i++ {
		for j := 0; j < m; j++ {
			bv := bias[j]
			seg := y[(i*m+j)*p : (i*m+j+1)*p]
			for q := range seg {
				seg[q] += bv
			}
		}
	}
}

// convTransposeKernel is the adjoint of Conv: every input value X[n, c, i]
// spreads W[c, m, t]·X into Y[n, m, i·s − padBeg + t·d]; out size per axis is
// s·(in−1) + output_padding + (k−1)·d + 1 − padBeg − padEnd unless
// output_shape is given (then SAME_* auto_pad derive the pads from it).
func convTransposeKernel(c *Call) error {
	if err := c.Need(2); err != nil {
		return err
	}
	x, w, b := c.In[0], c.In[1], c.Input(2)
	switch x.Data.(type) {
	case []float32:
		return convTransposeRun[float32](c, x, w, b)
	case []float64:
		return convTransposeRun[float64](c, x, w, b)
	}
	return fmt.Errorf("ConvTranspose does not support %v", x.DType)
}

func convTransposeRun[T Float](c *Call, x, w, b *tensor.Tensor) error {
	if x.Rank() < 3 || w.Rank() != x.Rank() {
		return fmt.Errorf("ConvTranspose needs X of rank ≥ 3 and W of the same rank, got %v and %v", x.Shape, w.Shape)
	}
	if w.DType != x.DType || b != nil && b.DType != x.DType {
		return fmt.Errorf("input types differ")
	}
	nd := x.Rank() - 2
	N, C := x.Shape[0], x.Shape[1]
	group := int(c.Int("group", 1))
	if group < 1 || C%group != 0 || w.Shape[0] != C {
		return fmt.Errorf("X %v, W %v do not fit group %d", x.Shape, w.Shape, group)
	}
	Cg, Mg := C/group, w.Shape[1]
	M := Mg * group
	if b != nil && b.Size() != M {
		return fmt.Errorf("bias of shape %v, want %d values", b.Shape, M)
	}
	g, err := convAttrs(c, nd, w.Shape[2:])
	if err != nil {
		return err
	}
	for i := range g.k {
		if g.k[i] != w.Shape[2+i] {
			return fmt.Errorf("kernel_shape %v does not match W %v", g.k, w.Shape)
		}
	}
	g.in = x.Shape[2:]
	g.clonePads()
	outPad := c.Ints("output_padding")
	if outPad == nil {
		outPad = make([]int, nd)
	}
	if len(outPad) != nd {
		return fmt.Errorf("output_padding %v does not fit %d spatial dimensions", outPad, nd)
	}
	outShapeAttr := c.Ints("output_shape")
	if len(outShapeAttr) == nd+2 {
		outShapeAttr = outShapeAttr[2:]
	}
	if outShapeAttr != nil && len(outShapeAttr) != nd {
		return fmt.Errorf("output_shape %v does not fit %d spatial dimensions", outShapeAttr, nd)
	}
	autoPad := c.Str("auto_pad", "NOTSET")
	g.out = make([]int, nd)
	for i := 0; i < nd; i++ {
		full := g.strides[i]*(g.in[i]-1) + outPad[i] + (g.k[i]-1)*g.dil[i] + 1
		switch autoPad {
		case "SAME_UPPER", "SAME_LOWER":
			o := g.in[i] * g.strides[i]
			if outShapeAttr != nil {
				o = outShapeAttr[i]
			}
			total := full - o
			small := total / 2
			if total < 0 {
				small = -((-total + 1) / 2) // floor division
			}
			if autoPad == "SAME_UPPER" {
				g.padBeg[i], g.padEnd[i] = small, total-small
			} else {
				g.padBeg[i], g.padEnd[i] = total-small, small
			}
			g.out[i] = o
		case "VALID", "NOTSET", "":
			if autoPad == "VALID" {
				g.padBeg[i], g.padEnd[i] = 0, 0
			}
			g.out[i] = full - g.padBeg[i] - g.padEnd[i]
			if outShapeAttr != nil {
				g.out[i] = outShapeAttr[i]
			}
		default:
			return fmt.Errorf("unknown auto_pad %q", autoPad)
		}
		if g.out[i] < 0 {
			return fmt.Errorf("output size %d < 0 on spatial axis %d", g.out[i], i)
		}
	}
	outShape := append([]int{N, M}, g.out...)
	if _, err := tensor.NumElements(outShape); err != nil {
		return err
	}
	out := c.Arena().New(x.DType, outShape) // zeroed: col2im adds into it
	xd, wd, yd := x.Data.([]T), w.Data.([]T), out.Data.([]T)
	K, P, inSize := 1, 1, 1
	for i := 0; i < nd; i++ {
		K *= g.k[i]
		P *= g.out[i]
		inSize *= g.in[i]
	}
	if _, err := tensor.NumElements([]int{Mg * K, inSize}); err != nil {
		return err
	}
	col := makeChecked[T](c.Arena(), Mg*K*inSize)
	// convWalk maps window position p to image coordinate p·s − padBeg + t·d,
	// exactly the transpose map with the input as positions and Y as image.
	for n := 0; n < N; n++ {
		for gi := 0; gi < group; gi++ {
			xg := xd[(n*C+gi*Cg)*inSize : (n*C+(gi+1)*Cg)*inSize]
			linGemmT(true, false, Mg*K, inSize, Cg, 1, wd[gi*Cg*Mg*K:], max(Mg*K, 1), xg, max(inSize, 1), 0, col, max(inSize, 1))
			yg := yd[(n*M+gi*Mg)*P : (n*M+(gi+1)*Mg)*P]
			convWalk(col, yg, Mg, &g, g.out, g.in, true, 0, inSize/max(g.in[nd-1], 1))
		}
	}
	if b != nil {
		convAddBias(yd, b.Data.([]T), N, M, P)
	}
	c.Set(0, out)
	return nil
}
