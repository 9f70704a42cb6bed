package check_test

import (
	"context"
	"testing"

	"github.com/vitals-health/vitals/check"
)

// BenchmarkCheckGradients: the time of a check with the backward pass
// against the same check without it (target: at most 3×), on the demo MLP
// (2,000 samples from the file) and on resnet_tiny, vgg_bn and
// mobile_hardswish (64 synthetic samples; convolutions, depthwise in the
// last). Run:
//
//	go test ./check -run '^$' -bench CheckGradients -benchtime 5x
func BenchmarkCheckGradients(b *testing.B) {
	for _, c := range []struct {
		name   string
		model  string
		sample check.Sample
	}{
		{"demo", demoModel, check.Sample{Data: []string{demoData}, Labels: "../testdata/demo/conditions.npy"}},
		{"resnet_tiny", refModel, check.Sample{Samples: 64}},
		{"vgg_bn", "../testdata/ref/vgg_bn.onnx", check.Sample{Samples: 64}},
		{"mobile_hardswish", "../testdata/ref/mobile_hardswish.onnx", check.Sample{Samples: 64}},
	} {
		m, err := check.Load(c.model, check.LoadOptions{})
		if err != nil {
			b.Fatal(err)
		}
		for _, g := range []struct {
			name string
			o    *check.Gradients
		}{{"forward", nil}, {"gradients", &check.Gradients{LR: 0.01}}} {
			b.Run(c.name+"/"+g.name, func(b *testing.B) {
				for i := 0; i < b.N; i++ {
					if _, err := check.Check(context.Background(), m, c.sample, check.Options{Gradients: g.o}); err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}
