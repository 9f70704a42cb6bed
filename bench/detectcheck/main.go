// Command detectcheck compares a model's outputs on vitals' executor with
// ONNX Runtime's, item by item: the shape of every output (for a detection
// model, the number of detections) must be equal, and every row (a
// detection: its box, score and label) must have a partner row on the other
// side with every value within a tolerance (-atol plus -rtol times the
// largest magnitude of that output), in any order. The reference outputs come from bench/ort/outputs.js, which
// feeds each item alone (models without a batch axis, such as torchvision's
// detection exports).
//
//	node bench/ort/outputs.js M.onnx X.npy 4 ort.json
//	go run ./bench/detectcheck -model M.onnx -data X.npy -ort ort.json -items 4
package main

import (
	"encoding/json"
	"flag"
	"fmt"
	"math"
	"os"

	"github.com/vitals-health/vitals/loader"
	"github.com/vitals-health/vitals/probe"
	"github.com/vitals-health/vitals/tensor"
)

type ortOut struct {
	Dims []int     `json:"dims"`
	Data []float64 `json:"data"`
}

func main() {
	modelPath := flag.String("model", "", "ONNX model")
	dataPath := flag.String("data", "", ".npy sample (first axis = items)")
	ortPath := flag.String("ort", "", "reference outputs (bench/ort/outputs.js)")
	items := flag.Int("items", 4, "items to compare")
	atol := flag.Float64("atol", 1e-3, "absolute tolerance")
	rtol := flag.Float64("rtol", 1e-4, "tolerance relative to the output's largest magnitude")
	flag.Parse()
	bad, err := run(*modelPath, *dataPath, *ortPath, *items, *atol, *rtol)
	if err != nil {
		fmt.Fprintln(os.Stderr, "detectcheck:", err)
		os.Exit(2)
	}
	if bad > 0 {
		fmt.Printf("MISMATCH: %d outputs differ from ONNX Runtime\n", bad)
		os.Exit(1)
	}
	fmt.Println("match: every output agrees with ONNX Runtime")
}

func run(modelPath, dataPath, ortPath string, items int, atol, rtol float64) (int, error) {
	m, err := loader.LoadModel(modelPath)
	if err != nil {
		return 0, err
	}
	p, err := probe.Compile(m)
	if err != nil {
		return 0, err
	}
	x, err := loader.ReadNpy(dataPath)
	if err != nil {
		return 0, err
	}
	raw, err := os.ReadFile(ortPath)
	if err != nil {
		return 0, err
	}
	var ref struct {
		Items []map[string]ortOut `json:"items"`
	}
	if err := json.Unmarshal(raw, &ref); err != nil {
		return 0, fmt.Errorf("%s: %w", ortPath, err)
	}
	items = min(items, x.Shape[0], len(ref.Items))
	size := x.Size() / x.Shape[0]
	bad := 0
	for i := 0; i < items; i++ {
		in := tensor.From(append([]float32{}, x.F32()[i*size:(i+1)*size]...), x.Shape[1:]...)
		outs, err := p.Run(map[string]*tensor.Tensor{m.Graph.Inputs[0].Name: in}, nil)
		if err != nil {
			return 0, fmt.Errorf("item %d: %w", i, err)
		}
		var cols []column
		for _, o := range m.Graph.Outputs {
			got, want := outs[o.Name], ref.Items[i][o.Name]
			scale := 0.0
			for _, v := range want.Data {
				scale = max(scale, math.Abs(v))
			}
			c := column{name: o.Name, got: got, want: want, tol: atol + rtol*scale}
			same := fmt.Sprint(got.Shape) == fmt.Sprint(want.Dims)
			fmt.Printf("item %d %-8s vitals %v ORT %v  %s\n", i, o.Name, got.Shape, want.Dims,
				map[bool]string{true: "same shape", false: "SHAPES DIFFER"}[same])
			if !same {
				bad++
				continue
			}
			cols = append(cols, c)
		}
		if len(cols) == len(m.Graph.Outputs) {
			unmatched, worst := matchRows(cols)
			fmt.Printf("item %d rows unmatched: %d; largest difference of matched values, per output:", i, unmatched)
			for k, c := range cols {
				fmt.Printf(" %s %.3g (tolerance %.3g)", c.name, worst[k], c.tol)
			}
			fmt.Println()
			if unmatched > 0 {
				bad++
			}
		}
	}
	return bad, nil
}

// column is one output of one item on both sides.
type column struct {
	name string
	got  *tensor.Tensor
	want ortOut
	tol  float64
}

// matchRows pairs the rows (index along axis 0, across every output: for a
// detection model one detection's box, score and label) of vitals' outputs
// with ORT's, each with the first unpaired ORT row whose values all lie
// within the outputs' tolerances: detections of nearly equal score may come
// in another order from two executors. It returns how many rows found no
// partner and, per output, the largest difference within the pairs.
func matchRows(cols []column) (int, []float64) {
	worst := make([]float64, len(cols))
	rows := -1
	for _, c := range cols {
		r := 1
		if len(c.want.Dims) > 0 {
			r = c.want.Dims[0]
		}
		if rows >= 0 && r != rows {
			rows = -2
		}
		if rows != -2 {
			rows = r
		}
	}
	if rows < 0 {
		rows = 1 // outputs of different lengths: compare as one row
	}
	used := make([]bool, rows)
	unmatched := 0
	for a := 0; a < rows; a++ {
		found := false
		for b := 0; b < rows && !found; b++ {
			if used[b] {
				continue
			}
			ok := true
			for _, c := range cols {
				w := len(c.want.Data) / rows
				for k := 0; k < w && ok; k++ {
					ok = math.Abs(valueAt(c.got, a*w+k)-c.want.Data[b*w+k]) <= c.tol
				}
			}
			if ok {
				found, used[b] = true, true
				for ci, c := range cols {
					w := len(c.want.Data) / rows
					for k := 0; k < w; k++ {
						worst[ci] = max(worst[ci], math.Abs(valueAt(c.got, a*w+k)-c.want.Data[b*w+k]))
					}
				}
			}
		}
		if !found {
			unmatched++
		}
	}
	return unmatched, worst
}

// valueAt reads element k of a float or integer tensor as float64 (integers
// here are labels and indices, far below 2^53).
func valueAt(t *tensor.Tensor, k int) float64 {
	if t.DType.IsFloat() {
		return t.Float64At(k)
	}
	return float64(t.Int64At(k))
}
