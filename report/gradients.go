package report

// Gradients describes the backward pass of a check: the loss, how the sample
// was batched, and what it could not differentiate.
type Gradients struct {
	// Loss is "cross-entropy" or "mse"; Target says what it was measured
	// against: "labels", "pseudo-labels" (the model's own top class) or
	// "targets" (the targets file).
	Loss   string `json:"loss"`
	Target string `json:"target"`
	// Value is the loss L, the mean over the sample.
	Value *float64 `json:"value"`
	// Samples and Batches: L is the mean over Samples, gradients are summed
	// over the batches and scaled by 1/Samples; Batch is the batch size.
	Samples int `json:"samples"`
	Batches int `json:"batches"`
	Batch   int `json:"batch"`
	// LR is the learning rate of the predicted update ratios (nil: none).
	LR *float64 `json:"lr"`
	// Mode states how the model was differentiated (BatchNorm's running
	// statistics, Dropout as the identity).
	Mode string `json:"mode"`
	// Missing is one line per operator type without a gradient rule that a
	// gradient reached; layers above them have no gradient statistics.
	Missing []string `json:"missing"`
	// Stopped, when set, says why the backward pass stopped early (the rest
	// of the report is unaffected).
	Stopped string `json:"stopped,omitempty"`
}
