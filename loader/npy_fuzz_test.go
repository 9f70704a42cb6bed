package loader

import (
	"archive/zip"
	"bytes"
	"io"
	"os"
	"path/filepath"
	"testing"
)

// addFixtures seeds a fuzz corpus with the testdata files matching pattern.
func addFixtures(f *testing.F, pattern string) {
	files, _ := filepath.Glob(filepath.Join("testdata", pattern))
	for _, p := range files {
		b, err := os.ReadFile(p)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
}

// readSome reads at most 64 batches from s (a shape like (10^12, 0) has many
// empty samples) and closes it.
func readSome(s Source) error {
	defer s.Close()
	for range 64 {
		if _, err := s.Next(3); err != nil {
			if err == io.EOF {
				return nil
			}
			return err
		}
	}
	return nil
}

// FuzzNpy: the whole-array and streaming readers never panic, agree with each
// other, and what they accept survives a WriteNpy round trip.
func FuzzNpy(f *testing.F) {
	addFixtures(f, "*.npy")
	f.Fuzz(func(t *testing.T, b []byte) {
		whole, err := readNpyAll(bytes.NewReader(b), int64(len(b)))
		if src, err2 := openNpyStream("fuzz.npy", bytes.NewReader(b), int64(len(b)), io.NopCloser(nil)); err2 == nil {
			if err := readSome(src); err != nil && whole != nil && whole.Size() > 0 && len(whole.Shape) > 0 {
				t.Fatalf("stream failed where the whole read succeeded: %v", err)
			}
		}
		if err != nil {
			return
		}
		var w1, w2 bytes.Buffer
		if err := WriteNpy(&w1, whole); err != nil {
			t.Fatalf("rewriting %v: %v", whole, err)
		}
		again, err := readNpyAll(bytes.NewReader(w1.Bytes()), int64(w1.Len()))
		if err != nil {
			t.Fatalf("re-reading our own output: %v", err)
		}
		WriteNpy(&w2, again)
		if !bytes.Equal(w1.Bytes(), w2.Bytes()) {
			t.Fatal("round trip changed the array")
		}
	})
}

// FuzzNpz: opening an archive and reading every member never panics, and
// allocations stay bounded by the size and deflate-ratio checks. With mode 0
// the input is the archive; with mode 1 (stored) or 2 (deflated) it is the
// content of one member "x.npy" inside a well-formed archive, so that the
// fuzzer reaches the member checks past the zip CRC.
func FuzzNpz(f *testing.F) {
	files, _ := filepath.Glob(filepath.Join("testdata", "*.np[yz]"))
	for _, p := range files {
		b, err := os.ReadFile(p)
		if err != nil {
			f.Fatal(err)
		}
		if filepath.Ext(p) == ".npz" {
			f.Add(b, uint8(0))
		} else {
			f.Add(b, uint8(1))
			f.Add(b, uint8(2))
		}
	}
	f.Fuzz(func(t *testing.T, b []byte, mode uint8) {
		if mode%3 != 0 {
			b = wrapMember(b, mode%3 == 2)
		}
		m, err := openNpz("fuzz.npz", bytes.NewReader(b), int64(len(b)), io.NopCloser(nil))
		if err != nil {
			return
		}
		for _, s := range m {
			readSome(s)
		}
	})
}

// wrapMember builds an archive holding content as "x.npy", stored or deflated.
func wrapMember(content []byte, deflate bool) []byte {
	var buf bytes.Buffer
	zw := zip.NewWriter(&buf)
	h := &zip.FileHeader{Name: "x.npy", Method: zip.Store}
	if deflate {
		h.Method = zip.Deflate
	}
	w, _ := zw.CreateHeader(h)
	w.Write(content)
	zw.Close()
	return buf.Bytes()
}
