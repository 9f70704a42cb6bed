package check

import "testing"

// Without Sample.Batch the batch size follows the node outputs per sample
// (autoBatchBytes, measured: see its comment), within the memory budget.
func TestChooseBatch(t *testing.T) {
	for _, c := range []struct {
		perItem int64
		want    int
	}{
		{23e6, 8},  // a ResNet-18-shaped CNN at 224×224
		{52e6, 3},  // a MobileNetV2-shaped CNN
		{40e3, 32}, // an MLP: capped at autoBatchMax
		{2e9, 1},   // more than autoBatchBytes for one sample
		{0, 32},
	} {
		if got := chooseBatch(c.perItem, 0); got != c.want {
			t.Errorf("chooseBatch(%d) = %d, want %d", c.perItem, got, c.want)
		}
	}
	// a quarter of a 400 MiB budget is 100 MiB: 4 samples of 23 MB
	if got := chooseBatch(23e6, 400<<20); got != 4 {
		t.Errorf("within a 400 MiB budget: chooseBatch(23e6) = %d, want 4", got)
	}
}
