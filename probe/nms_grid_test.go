package probe

import (
	"math"
	"math/rand"
	"reflect"
	"testing"
)

// nmsSelectGrid keeps exactly the boxes nmsSelect keeps (the greedy
// selection of the ONNX NonMaxSuppression definition), on random boxes laid
// out as detection exports pass them (each class shifted along x by a
// constant, all in one call), of many sizes, with duplicates, empty and
// inverted boxes, NaN and infinite corners, limits and thresholds.
func TestNMSGridMatchesPlain(t *testing.T) {
	r := rand.New(rand.NewSource(81))
	for trial := 0; trial < 200; trial++ {
		n := 300 + r.Intn(3000)
		boxes := make([]float32, 4*n)
		for i := 0; i < n; i++ {
			shift := float32(r.Intn(20)) * 400
			cx, cy := shift+r.Float32()*320, r.Float32()*320
			w, h := r.Float32()*r.Float32()*200, r.Float32()*r.Float32()*200
			if r.Intn(3) == 0 && i > 0 {
				copy(boxes[4*i:4*i+4], boxes[4*(i-1):4*i]) // duplicate
				boxes[4*i] += r.Float32()
				continue
			}
			boxes[4*i], boxes[4*i+1], boxes[4*i+2], boxes[4*i+3] = cy-h/2, cx-w/2, cy+h/2, cx+w/2
			switch r.Intn(200) {
			case 0:
				boxes[4*i+2] = boxes[4*i] // empty
			case 1:
				boxes[4*i+1] = float32(math.NaN())
			case 2:
				if trial%10 == 0 {
					boxes[4*i+3] = float32(math.Inf(1))
				}
			}
		}
		geo := make([]float32, 5*n)
		nmsCorners(geo, boxes, false)
		order := r.Perm(n)
		thr := float32([]float64{0.3, 0.5, 0.7, 0}[trial%4])
		maxOut := int64([]int{1 << 30, 50, n}[trial%3])
		want := nmsSelect(nil, order, geo, thr, maxOut)
		got := nmsSelectGrid(nil, order, geo, thr, maxOut)
		if !reflect.DeepEqual(got, want) {
			t.Fatalf("trial %d (n %d thr %g max %d): grid kept %d boxes, plain %d", trial, n, thr, maxOut, len(got), len(want))
		}
	}
}
