package loader

import (
	"bytes"
	"encoding/binary"
	"hash/crc32"
	"image"
	"image/color"
	"image/jpeg"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func writePNG(t *testing.T, path string, img image.Image) {
	t.Helper()
	var b bytes.Buffer
	if err := png.Encode(&b, img); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, b.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
}

func near(a, b, tol float32) bool { return math.Abs(float64(a-b)) <= float64(tol) }

// Same-size output: pixels pass through exactly, scaled to [0,1] and normalised.
func TestImagesIdentityNCHWandNHWC(t *testing.T) {
	dir := t.TempDir()
	img := image.NewNRGBA(image.Rect(0, 0, 3, 2))
	for y := range 2 {
		for x := range 3 {
			img.Set(x, y, color.NRGBA{uint8(10 * x), uint8(100 + 10*y), uint8(50*x + 5*y), 255})
		}
	}
	writePNG(t, filepath.Join(dir, "b.png"), img)
	writePNG(t, filepath.Join(dir, "a.png"), image.NewGray(image.Rect(0, 0, 3, 2))) // all zero
	os.WriteFile(filepath.Join(dir, "notes.txt"), []byte("not an image"), 0o644)
	os.Mkdir(filepath.Join(dir, "sub.png"), 0o755)

	mean, std := []float32{0.1, 0.2, 0.3}, []float32{0.5, 0.25, 2}
	for _, layout := range []string{"", "nhwc"} {
		src, err := OpenImages(dir, ImageOptions{Height: 2, Width: 3, Mean: mean, Std: std, Layout: layout})
		if err != nil {
			t.Fatal(err)
		}
		if src.Len() != 2 {
			t.Fatalf("Len %d, want 2 (non-images skipped)", src.Len())
		}
		x := drain(t, src, 1)
		d := x.F32()
		at := func(n, c, y, xx int) float32 {
			if layout == "nhwc" {
				return d[n*18+(y*3+xx)*3+c]
			}
			return d[n*18+c*6+y*3+xx]
		}
		for y := range 2 {
			for xx := range 3 {
				raw := [3]float32{float32(10 * xx), float32(100 + 10*y), float32(50*xx + 5*y)}
				for c := range 3 {
					// a.png (all black) comes first: (0 − mean)/std.
					if got, want := at(0, c, y, xx), -mean[c]/std[c]; !near(got, want, 1e-6) {
						t.Errorf("%s a.png c%d (%d,%d): %v want %v", layout, c, y, xx, got, want)
					}
					if got, want := at(1, c, y, xx), (raw[c]/255-mean[c])/std[c]; !near(got, want, 1e-6) {
						t.Errorf("%s b.png c%d (%d,%d): %v want %v", layout, c, y, xx, got, want)
					}
				}
			}
		}
	}
}

// Bilinear with half-pixel centres, against hand-computed values (the same as
// PyTorch's interpolate(mode="bilinear", align_corners=False)).
func TestImagesBilinear(t *testing.T) {
	dir := t.TempDir()
	// 2×1 gray row [0, 255] upscaled to 4 wide: sx = -0.25, 0.25, 0.75, 1.25 → clamp → 0, .25, .75, 1.
	g := image.NewGray(image.Rect(0, 0, 2, 1))
	g.Pix[1] = 255
	writePNG(t, filepath.Join(dir, "up.png"), g)
	src, err := OpenImages(dir, ImageOptions{Channels: 1, Height: 2, Width: 4})
	if err != nil {
		t.Fatal(err)
	}
	x := drain(t, src, 8).F32()
	want := []float32{0, 0.25, 0.75, 1, 0, 0.25, 0.75, 1}
	for i := range want {
		if !near(x[i], want[i], 1e-6) {
			t.Fatalf("upscale: got %v want %v", x, want)
		}
	}

	// 4×1 row [0, 40, 80, 200] downscaled to 2: sx = 0.5, 2.5 → (0+40)/2, (80+200)/2.
	dir = t.TempDir()
	g = image.NewGray(image.Rect(0, 0, 4, 1))
	copy(g.Pix, []uint8{0, 40, 80, 200})
	writePNG(t, filepath.Join(dir, "down.png"), g)
	src, _ = OpenImages(dir, ImageOptions{Channels: 1, Height: 1, Width: 2})
	x = drain(t, src, 1).F32()
	if !near(x[0], 20.0/255, 1e-6) || !near(x[1], 140.0/255, 1e-6) {
		t.Errorf("downscale: got %v", x)
	}
}

func TestImagesGrayscaleAndJPEG(t *testing.T) {
	dir := t.TempDir()
	img := image.NewRGBA(image.Rect(0, 0, 16, 16))
	for i := 0; i < len(img.Pix); i += 4 {
		copy(img.Pix[i:], []uint8{200, 100, 50, 255})
	}
	var b bytes.Buffer
	if err := jpeg.Encode(&b, img, &jpeg.Options{Quality: 100}); err != nil {
		t.Fatal(err)
	}
	os.WriteFile(filepath.Join(dir, "c.JPG"), b.Bytes(), 0o644)
	writePNG(t, filepath.Join(dir, "d.png"), img)

	// RGB from JPEG: flat colour survives within JPEG rounding.
	src, err := OpenImages(dir, ImageOptions{Height: 8, Width: 8})
	if err != nil {
		t.Fatal(err)
	}
	x := drain(t, src, 5)
	if x.Shape[0] != 2 || x.Shape[1] != 3 {
		t.Fatalf("shape %v", x.Shape)
	}
	d := x.F32()
	for c, v := range []float32{200, 100, 50} {
		if got := d[c*64+27]; !near(got, v/255, 3.0/255) {
			t.Errorf("jpeg channel %d: %v want %v", c, got, v/255)
		}
	}
	// Luma, ITU-R BT.601: 0.299·200 + 0.587·100 + 0.114·50 = 124.2.
	src, _ = OpenImages(dir, ImageOptions{Channels: 1, Height: 4, Width: 4})
	x = drain(t, src, 2)
	if got := x.F32()[16+5]; !near(got, 124.2/255, 1e-5) {
		t.Errorf("png luma %v want %v", got, 124.2/255)
	}
}

func TestImagesRejects(t *testing.T) {
	dir := t.TempDir()
	os.WriteFile(filepath.Join(dir, "bad.png"), []byte("\x89PNG\r\n\x1a\nnope"), 0o644)
	src, err := OpenImages(dir, ImageOptions{Height: 4, Width: 4})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := src.Next(1); err == nil || !strings.Contains(err.Error(), "bad.png") {
		t.Errorf("undecodable: %v", err)
	}

	// A valid PNG header (with a correct CRC) claiming 20000×20000 pixels.
	dir = t.TempDir()
	var b bytes.Buffer
	png.Encode(&b, image.NewGray(image.Rect(0, 0, 1, 1)))
	p := b.Bytes()
	binary.BigEndian.PutUint32(p[16:], 20000)
	binary.BigEndian.PutUint32(p[20:], 20000)
	binary.BigEndian.PutUint32(p[29:], crc32.ChecksumIEEE(p[12:29]))
	os.WriteFile(filepath.Join(dir, "giant.png"), p, 0o644)
	src, _ = OpenImages(dir, ImageOptions{Height: 4, Width: 4})
	if _, err := src.Next(1); err == nil || !strings.Contains(err.Error(), "giant.png") || !strings.Contains(err.Error(), "20000×20000") {
		t.Errorf("giant: %v", err)
	}

	for _, opt := range []ImageOptions{
		{Height: 0, Width: 4},
		{Height: 4, Width: 4, Channels: 2},
		{Height: 4, Width: 4, Std: []float32{1, 0, 1}},
		{Height: 4, Width: 4, Mean: []float32{1, 2}},
		{Height: 4, Width: 4, Layout: "chw"},
	} {
		if _, err := OpenImages(dir, opt); err == nil {
			t.Errorf("options %+v accepted", opt)
		}
	}
	if _, err := OpenImages(t.TempDir(), ImageOptions{Height: 4, Width: 4}); err == nil || !strings.Contains(err.Error(), "no .png") {
		t.Errorf("empty folder: %v", err)
	}
}
