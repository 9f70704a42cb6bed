package loader

import (
	"archive/zip"
	"bytes"
	"compress/flate"
	"hash/crc32"
	"io"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/vitals-health/vitals/tensor"
)

func TestOpenNpzFixtures(t *testing.T) {
	for _, file := range []string{"samples.npz", "samples_z.npz"} {
		m, err := OpenNpz(filepath.Join("testdata", file))
		if err != nil {
			t.Fatalf("%s: %v", file, err)
		}
		if len(m) != 2 || m["x"] == nil || m["y"] == nil {
			t.Fatalf("%s: members %v", file, m)
		}
		if !strings.Contains(m["x"].Name(), file) || !strings.Contains(m["x"].Name(), "x.npy") {
			t.Errorf("name %q", m["x"].Name())
		}
		// Interleaved reads from both members of one archive.
		y1, err := m["y"].Next(3)
		if err != nil {
			t.Fatal(err)
		}
		x := drain(t, m["x"], 3)
		y, err := m["y"].Next(3)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := m["y"].Next(3); err != io.EOF {
			t.Fatalf("y: %v", err)
		}
		m["y"].Close()
		if want := f4Fixture(); !reflect.DeepEqual(x.Data, want.Data) || !tensor.SameShape(x.Shape, want.Shape) {
			t.Errorf("%s x: %v %v", file, x, x.Data)
		}
		if got := append(y1.I64(), y.I64()...); !reflect.DeepEqual(got, []int64{0, 1, 2, 3}) {
			t.Errorf("%s y: %v", file, got)
		}
	}
}

// zipMember describes one raw member of a hand-made archive.
type zipMember struct {
	name     string
	content  []byte // uncompressed bytes actually stored
	declared int64  // declared uncompressed size (-1: true size)
	deflate  bool
}

func makeZip(t *testing.T, members ...zipMember) []byte {
	t.Helper()
	var buf bytes.Buffer
	zw := zip.NewWriter(&buf)
	for _, m := range members {
		body := m.content
		method := zip.Store
		if m.deflate {
			var c bytes.Buffer
			fw, _ := flate.NewWriter(&c, flate.BestCompression)
			fw.Write(m.content)
			fw.Close()
			body = c.Bytes()
			method = zip.Deflate
		}
		unc := uint64(len(m.content))
		if m.declared >= 0 {
			unc = uint64(m.declared)
		}
		w, err := zw.CreateRaw(&zip.FileHeader{
			Name: m.name, Method: method, CRC32: crc32.ChecksumIEEE(m.content),
			CompressedSize64: uint64(len(body)), UncompressedSize64: unc,
		})
		if err != nil {
			t.Fatal(err)
		}
		w.Write(body)
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func npyBytes(t *testing.T, x *tensor.Tensor) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := WriteNpy(&b, x); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// openAll opens an archive and reads every member to the end, returning the first error.
func openAll(t *testing.T, path string) error {
	m, err := OpenNpz(path)
	if err != nil {
		return err
	}
	var first error
	for _, s := range m {
		for first == nil {
			if _, err := s.Next(4); err != nil {
				if err.Error() != "EOF" {
					first = err
				}
				break
			}
		}
		s.Close()
	}
	return first
}

func TestNpzRejects(t *testing.T) {
	small := npyBytes(t, tensor.From(make([]float32, 10), 10))
	hdrLen := int64(len(small) - 40)
	// A header claiming 2^30 float32 samples (4 GiB) over a few compressed bytes.
	var hb bytes.Buffer
	WriteNpy(&hb, tensor.From([]float32{}, 0))
	bombHdr := bytes.Replace(hb.Bytes(), []byte("(0,)"), []byte("(1073741824,)"), 1)
	// Decompresses to 1 MiB more than declared: the header + 40 bytes are honest.
	overflow := append(append([]byte{}, small...), make([]byte, 1<<20)...)

	cases := []struct {
		name, want string
		zip        []byte
	}{
		{"dotdot", `".."`, makeZip(t, zipMember{"../evil.npy", small, -1, false})},
		{"nested dotdot", `".."`, makeZip(t, zipMember{"a/../../evil.npy", small, -1, true})},
		{"absolute", "absolute", makeZip(t, zipMember{"/etc/evil.npy", small, -1, false})},
		{"backslash absolute", "absolute", makeZip(t, zipMember{`\evil.npy`, small, -1, false})},
		{"declared huge", "zip bomb", makeZip(t, zipMember{"x.npy", bombHdr, hdrLen + 1<<32, true})},
		{"declared vs implied", "imply", makeZip(t, zipMember{"x.npy", small, int64(len(small)) + 8, true})},
		{"decompresses past declared", "more bytes than declared", makeZip(t, zipMember{"x.npy", overflow, int64(len(small)), true})},
		{"stored size mismatch", "stored", makeZip(t, zipMember{"x.npy", small, int64(len(small)) - 4, false})},
		{"no arrays", "no .npy", makeZip(t, zipMember{"readme.txt", []byte("hi"), -1, false})},
		{"not a zip", "zip", []byte("PK\x03\x04 nothing here")},
	}
	dir := t.TempDir()
	for _, c := range cases {
		p := filepath.Join(dir, strings.ReplaceAll(c.name, " ", "_")+".npz")
		if err := os.WriteFile(p, c.zip, 0o644); err != nil {
			t.Fatal(err)
		}
		err := openAll(t, p)
		if err == nil || !strings.Contains(err.Error(), filepath.Base(p)) || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: want an error naming the file and containing %q, got %v", c.name, c.want, err)
		}
	}
}

func TestNpzIgnoresOtherMembers(t *testing.T) {
	x := tensor.From([]float64{1, 2, 3, 4}, 2, 2)
	p := filepath.Join(t.TempDir(), "one.npz")
	os.WriteFile(p, makeZip(t,
		zipMember{"notes.txt", []byte("hello"), -1, false},
		zipMember{"dir/", nil, -1, false},
		zipMember{"in.npy", npyBytes(t, x), -1, true}), 0o644)
	// OpenFile accepts an archive with one array.
	src, err := OpenFile(p)
	if err != nil {
		t.Fatal(err)
	}
	if got := drain(t, src, 1); !reflect.DeepEqual(got.Data, x.Data) {
		t.Errorf("got %v", got.Data)
	}
	// ... and refuses one with several, listing them.
	_, err = OpenFile(filepath.Join("testdata", "samples.npz"))
	if err == nil || !strings.Contains(err.Error(), "[x y]") {
		t.Errorf("two-array archive via OpenFile: %v", err)
	}
}

func TestNpzCRC(t *testing.T) {
	x := npyBytes(t, tensor.From([]int32{1, 2, 3}, 3))
	zb := makeZip(t, zipMember{"x.npy", x, -1, false})
	// Flip one data byte in the stored member (the last element's low byte).
	i := bytes.Index(zb, []byte{3, 0, 0, 0})
	zb[i] = 4
	p := filepath.Join(t.TempDir(), "crc.npz")
	os.WriteFile(p, zb, 0o644)
	if err := openAll(t, p); err == nil || !strings.Contains(err.Error(), "crc.npz") || !strings.Contains(err.Error(), "CRC") {
		t.Errorf("want a checksum error, got %v", err)
	}
}
