package stats

import (
	"github.com/vitals-health/vitals/report"
)

var outputHealthCheck = &Check{
	Name: "output-health",
	Doc: "Confidence of the first graph output where it holds class scores, and with labels its accuracy and cross-entropy against ln C. " +
		"Reported: the mean top probability (overconfident or near-uniform), accuracy and mean cross-entropy. " +
		"Common practice: an untrained C-class softmax has loss ≈ ln C. " +
		"Judged only for class scores: [N, C] (probabilities or logits) or a Softmax/LogSoftmax over the last axis; a per-pixel map such as [N, 1, H, W] or a regression output gets plain statistics in the layers table.",
	Defaults: map[string]float64{"output-health.overconfident": 0.99, "output-health.uniform_factor": 1.5},
	Run: func(p *Pass) {
		o := p.Report.Output
		if o == nil || o.MeanMaxProb == nil {
			return
		}
		mp := *o.MeanMaxProb
		ev := map[string]any{"mean_max_prob": mp, "classes": o.Classes, "is_distribution": o.IsDistribution}
		switch {
		case mp > p.T("overconfident"):
			p.Emit(report.Info, o.Name, 1, ev, "mean top-class probability is %.4f: the model is near-certain on almost every sample", mp)
		case mp < p.T("uniform_factor")/float64(o.Classes):
			p.Emit(report.Info, o.Name, 1, ev, "mean top-class probability is %.3f over %d classes: outputs are close to uniform, as an untrained model's would be", mp, o.Classes)
		}
		if o.Accuracy != nil {
			ev2 := map[string]any{"accuracy": *o.Accuracy, "cross_entropy": o.CrossEntropy, "ln_classes": o.LnClasses, "labeled": o.Labeled}
			p.Emit(report.Info, o.Name, 1, ev2, "accuracy %.1f%% on %d labelled samples; mean cross-entropy %.3f (ln %d = %.3f is chance level)",
				100**o.Accuracy, o.Labeled, report.Val(o.CrossEntropy), o.Classes, report.Val(o.LnClasses))
		}
	},
}
