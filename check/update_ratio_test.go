package check_test

import (
	"context"
	"math"
	"testing"

	"github.com/vitals-health/vitals/check"
	"github.com/vitals-health/vitals/report"
)

// update-ratio predicts one plain-SGD step's size relative to each weight,
// lr·‖dL/dW‖/‖W‖, and warns far from the rule of thumb of about 1e-3 per
// step (common practice; the check's lines are 1e-5 and 1e-1). On the
// demo's checkpoint the ratios ‖dL/dW‖/‖W‖ lie between about 7e-4 and 3e-2,
// so a learning rate of 100 puts some weights above 1e-1 and one of 1e-6
// puts every weight below 1e-5, while at 1 every ratio stays within the
// lines: the weights warned about are exactly those
// whose computed ratio crosses a line, and each ratio is lr times the
// weight's grad_to_weight.
func TestUpdateRatioCheck(t *testing.T) {
	m := load(t, demoModel)
	for _, lr := range []float64{100, 1, 1e-6} {
		rep, err := check.Check(context.Background(), m,
			check.Sample{Data: []string{demoData}, Labels: "../testdata/demo/conditions.npy", Samples: 512, Batch: 64},
			check.Options{Gradients: &check.Gradients{LR: lr}})
		if err != nil {
			t.Fatal(err)
		}
		warned := map[string]bool{}
		for _, f := range rep.Findings {
			if f.Check == "update-ratio" {
				if f.Severity != report.Warning {
					t.Errorf("lr %g: %s: severity %s, want warning", lr, f.Node, f.Severity)
				}
				warned[f.Evidence["weight"].(string)] = true
			}
		}
		crossed := 0
		for _, w := range rep.Weights {
			if w.UpdateRatio == nil || w.GradToWeight == nil {
				t.Fatalf("lr %g: weight %s has no update ratio", lr, w.Name)
			}
			u := *w.UpdateRatio
			if want := lr * *w.GradToWeight; math.Abs(u-want) > 1e-12*math.Abs(want) {
				t.Errorf("lr %g: %s: update ratio %g, want lr·grad_to_weight = %g", lr, w.Name, u, want)
			}
			cross := u < 1e-5 || u > 1e-1
			if cross {
				crossed++
			}
			if warned[w.Name] != cross {
				t.Errorf("lr %g: %s: ratio %g, warned %v", lr, w.Name, u, warned[w.Name])
			}
		}
		switch lr {
		case 100, 1e-6:
			if crossed == 0 {
				t.Errorf("lr %g: no weight crosses a line; the test would not exercise the check", lr)
			}
		case 1:
			if crossed != 0 {
				t.Errorf("lr 1: %d weights flagged though every ratio lies within two decades of 1e-3", crossed)
			}
		}
	}
}
