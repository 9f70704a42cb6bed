package modeltest

import (
	"archive/zip"
	"encoding/binary"
	"io"
	"math"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

// ReadNpz reads every member of an .npz written by NumPy (little-endian
// float32, float64 or int64, C order) as float64 values.
func ReadNpz(t testing.TB, path string) map[string][]float64 {
	t.Helper()
	z, err := zip.OpenReader(path)
	if err != nil {
		t.Fatal(err)
	}
	defer z.Close()
	out := map[string][]float64{}
	descr := regexp.MustCompile(`'descr':\s*'([<|]?)([fi])(\d)'`)
	for _, f := range z.File {
		r, err := f.Open()
		if err != nil {
			t.Fatal(err)
		}
		b, err := io.ReadAll(r)
		r.Close()
		if err != nil {
			t.Fatal(err)
		}
		hl := int(binary.LittleEndian.Uint16(b[8:10]))
		hdr, data := string(b[10:10+hl]), b[10+hl:]
		if strings.Contains(hdr, "'fortran_order': True") {
			t.Fatalf("%s: %s is Fortran order", path, f.Name)
		}
		m := descr.FindStringSubmatch(hdr)
		if m == nil {
			t.Fatalf("%s: %s: unsupported header %s", path, f.Name, hdr)
		}
		size, _ := strconv.Atoi(m[3])
		vals := make([]float64, len(data)/size)
		for i := range vals {
			e := data[i*size : (i+1)*size]
			switch m[2] + m[3] {
			case "f4":
				vals[i] = float64(math.Float32frombits(binary.LittleEndian.Uint32(e)))
			case "f8":
				vals[i] = math.Float64frombits(binary.LittleEndian.Uint64(e))
			case "i8":
				vals[i] = float64(int64(binary.LittleEndian.Uint64(e)))
			default:
				t.Fatalf("%s: %s: dtype %s", path, f.Name, m[2]+m[3])
			}
		}
		out[strings.TrimSuffix(f.Name, ".npy")] = vals
	}
	return out
}
