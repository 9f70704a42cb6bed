package check_test

import (
	"context"
	"fmt"
	"log"

	"github.com/vitals-health/vitals/check"
)

// Check the demo checkpoint (an over-driven 4-layer network of our invented
// spindle-monitoring scenario) on its 2000 recorded readings and read the
// report: the sample, a layer's statistics and the findings.
func ExampleCheck() {
	m, err := check.Load("../testdata/demo/spindle-overdriven.onnx", check.LoadOptions{})
	if err != nil {
		log.Fatal(err)
	}
	r, err := check.Check(context.Background(), m, check.Sample{Data: []string{"../testdata/demo/readings.npy"}}, check.Options{})
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println("samples:", r.Input.Samples, "layers:", len(r.Layers))
	for _, l := range r.Layers {
		if l.Node == "/relu3/Relu" {
			fmt.Printf("%s: %d units, %.1f%% dead\n", l.Node, *l.Units, 100**l.DeadFraction)
		}
	}
	for _, f := range r.Findings {
		if f.Check == "dead-units" && f.Node == "/relu3/Relu" {
			fmt.Println(f.Severity, f.Check, "on", f.Node)
		}
	}
	// Output:
	// samples: 2000 layers: 7
	// /relu3/Relu: 32 units, 75.0% dead
	// error dead-units on /relu3/Relu
}

// Compare a healthy and an over-driven checkpoint of the same network on the
// same readings: the report of the newer one carries the differences and
// how often the two agree on the predicted class.
func ExampleCompare() {
	load := func(path string) *check.Model {
		m, err := check.Load(path, check.LoadOptions{})
		if err != nil {
			log.Fatal(err)
		}
		return m
	}
	old, new := load("../testdata/demo/spindle-healthy.onnx"), load("../testdata/demo/spindle-overdriven.onnx")
	sample := check.Sample{Data: []string{"../testdata/demo/readings.npy"}, Batch: 100}
	r, err := check.Compare(context.Background(), old, new, sample, check.Options{})
	if err != nil {
		log.Fatal(err)
	}
	ag := r.Compare.Agreement
	fmt.Println("compared", ag.Samples, "outputs of", ag.Output, "layers matched:", len(r.Compare.Layers))
	// Output:
	// compared 2000 outputs of output layers matched: 7
}

// Thresholds are validated before anything runs: a name no check has is
// an error at once.
func ExampleOptions_Validate() {
	o := check.Options{Thresholds: map[string]float64{"dead-units.warning": 0.3, "dead-unit.error": 0.5}}
	if err := o.Validate(); err != nil {
		fmt.Println(err.Error()[:43])
	}
	// Output:
	// unknown threshold "dead-unit.error" (known:
}
