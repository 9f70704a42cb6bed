package loader

import (
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

// Skip(k) then Next gives the rows k... of the array NumPy wrote
// (testdata/demo/readings.npy, float32 [2000, 24]), read whole by ReadNpy.
func TestSkipThenNextMatchesWhole(t *testing.T) {
	const path = "../testdata/demo/readings.npy"
	whole, err := ReadNpy(path)
	if err != nil {
		t.Fatal(err)
	}
	all := whole.Data.([]float32)
	for _, k := range []int{0, 1, 640, 1999} {
		for name, open := range map[string]func() (Source, error){
			"npy":    func() (Source, error) { return OpenNpy(path) },
			"memory": func() (Source, error) { return NewTensorSource("x", whole) },
		} {
			src, err := open()
			if err != nil {
				t.Fatal(err)
			}
			if err := src.(Skipper).Skip(k); err != nil {
				t.Fatalf("%s: Skip(%d): %v", name, k, err)
			}
			got, err := src.Next(5)
			if err != nil {
				t.Fatalf("%s: Next after Skip(%d): %v", name, k, err)
			}
			n := min(5, 2000-k)
			if got.Shape[0] != n {
				t.Fatalf("%s: %d rows after Skip(%d), want %d", name, got.Shape[0], k, n)
			}
			want := tensor.From(all[k*24:(k+n)*24], n, 24)
			for i, v := range got.Data.([]float32) {
				if v != want.Data.([]float32)[i] {
					t.Fatalf("%s: Skip(%d): value %d is %v, want %v", name, k, i, v, want.Data.([]float32)[i])
				}
			}
			src.Close()
		}
	}
}
