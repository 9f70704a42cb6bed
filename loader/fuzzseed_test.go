package loader

import (
	"crypto/sha256"
	"fmt"
	"os"
	"path/filepath"
	"testing"

	"google.golang.org/protobuf/proto"
)

// The seed models decode: the fuzzer starts from inputs that reach deep.
func TestFuzzSeedModelsDecode(t *testing.T) {
	dir := fuzzDir(t)
	for i, b := range seedModels(t) {
		if _, err := DecodeModel(b, dir); err != nil {
			t.Errorf("seed %d: %v", i, err)
		}
	}
	for i, tp := range seedTensors() {
		b, _ := proto.Marshal(tp)
		if _, err := DecodeTensor(b); err != nil {
			t.Errorf("tensor seed %d: %v", i, err)
		}
	}
}

// TestWriteFuzzSeeds writes the generated seeds into testdata/fuzz in the
// go-fuzz corpus format when VITALS_WRITE_FUZZ_SEEDS=1 (they are committed).
func TestWriteFuzzSeeds(t *testing.T) {
	if os.Getenv("VITALS_WRITE_FUZZ_SEEDS") != "1" {
		t.Skip("set VITALS_WRITE_FUZZ_SEEDS=1 to rewrite testdata/fuzz seeds")
	}
	write := func(target string, b []byte) {
		dir := filepath.Join("testdata", "fuzz", target)
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		name := fmt.Sprintf("seed-%x", sha256.Sum256(b))[:21]
		body := fmt.Sprintf("go test fuzz v1\n[]byte(%q)\n", b)
		if err := os.WriteFile(filepath.Join(dir, name), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	for _, b := range seedModels(t) {
		write("FuzzDecodeModel", b)
	}
	for _, tp := range seedTensors() {
		b, _ := proto.Marshal(tp)
		write("FuzzDecodeTensor", b)
	}
}
