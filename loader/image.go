package loader

import (
	"fmt"
	"image"
	_ "image/jpeg" // registers the JPEG decoder
	_ "image/png"  // registers the PNG decoder
	"io"
	"os"
	"path/filepath"
	"strings"

	"github.com/vitals-health/vitals/tensor"
)

// Limits checked on an image's header (image.DecodeConfig) before decoding it.
const (
	MaxImageSide   = 16384       // pixels per side
	MaxImagePixels = 100_000_000 // width × height
)

// ImageOptions says how images become model input.
type ImageOptions struct {
	Channels int       // 1 (grayscale) or 3 (RGB); 0 means 3
	Height   int       // output height in pixels (required)
	Width    int       // output width in pixels (required)
	Mean     []float32 // per channel, in [0,1] units; empty means 0; one value applies to all channels
	Std      []float32 // per channel, in [0,1] units; empty means 1; one value applies to all channels
	Layout   string    // "nchw" (default) or "nhwc"
}

// OpenImages serves the PNG and JPEG files of folder dir (not its
// subfolders), sorted by file name, as float32 samples of shape [C, H, W]
// ("nchw") or [H, W, C] ("nhwc"). Files whose extension is not .png, .jpg or
// .jpeg are skipped.
//
// For each image, in order:
//  1. its header is read and images wider or taller than MaxImageSide or
//     larger than MaxImagePixels are refused before decoding;
//  2. pixels become straight (non-premultiplied) RGB in [0,1]: an 8-bit value
//     v gives v/255, a 16-bit value v/65535; alpha is dropped without
//     compositing (as PIL's convert("RGB") does);
//  3. with Channels = 1, luma L = 0.299 R + 0.587 G + 0.114 B (ITU-R BT.601);
//  4. the image is resized to Height × Width by bilinear interpolation with
//     half-pixel centres: output pixel x samples the source at
//     sx = (x + 0.5)·inW/outW − 0.5, clamped to [0, inW−1] (likewise y), and
//     blends the 2×2 neighbours by the fractional parts (as PyTorch's
//     interpolate(mode="bilinear", align_corners=False) without antialiasing;
//     strong downscaling therefore aliases);
//  5. each channel c becomes (v − Mean[c]) / Std[c].
//
// An undecodable image is an error naming the file.
func OpenImages(dir string, opt ImageOptions) (Source, error) {
	if opt.Channels == 0 {
		opt.Channels = 3
	}
	if opt.Channels != 1 && opt.Channels != 3 {
		return nil, fmt.Errorf("reading images in %q: channels must be 1 or 3, not %d", dir, opt.Channels)
	}
	if opt.Height <= 0 || opt.Width <= 0 || opt.Height > MaxImageSide || opt.Width > MaxImageSide {
		return nil, fmt.Errorf("reading images in %q: output size %d×%d must be between 1 and %d per side", dir, opt.Height, opt.Width, MaxImageSide)
	}
	switch strings.ToLower(opt.Layout) {
	case "", "nchw":
		opt.Layout = "nchw"
	case "nhwc":
		opt.Layout = "nhwc"
	default:
		return nil, fmt.Errorf("reading images in %q: layout %q (want nchw or nhwc)", dir, opt.Layout)
	}
	mean, err := perChannel("mean", opt.Mean, 0, opt.Channels)
	if err != nil {
		return nil, fmt.Errorf("reading images in %q: %w", dir, err)
	}
	std, err := perChannel("std", opt.Std, 1, opt.Channels)
	if err != nil {
		return nil, fmt.Errorf("reading images in %q: %w", dir, err)
	}
	for c, s := range std {
		if !(s > 0) {
			return nil, fmt.Errorf("reading images in %q: std[%d] = %v must be positive", dir, c, s)
		}
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("reading images in %q: %w", dir, err)
	}
	var files []string
	for _, e := range entries {
		switch strings.ToLower(filepath.Ext(e.Name())) {
		case ".png", ".jpg", ".jpeg":
			if !e.IsDir() {
				files = append(files, filepath.Join(dir, e.Name()))
			}
		}
	}
	if len(files) == 0 {
		return nil, fmt.Errorf("reading images in %q: no .png, .jpg or .jpeg files", dir)
	}
	return &imageSource{dir: dir, opt: opt, mean: mean, std: std, files: files}, nil
}

// perChannel expands a per-channel parameter: empty → def, one value → all.
func perChannel(what string, v []float32, def float32, c int) ([]float32, error) {
	out := make([]float32, c)
	switch len(v) {
	case 0:
		for i := range out {
			out[i] = def
		}
	case 1:
		for i := range out {
			out[i] = v[0]
		}
	case c:
		copy(out, v)
	default:
		return nil, fmt.Errorf("%s has %d values for %d channels", what, len(v), c)
	}
	return out, nil
}

type imageSource struct {
	dir       string
	opt       ImageOptions
	mean, std []float32
	files     []string
	pos       int
	closed    bool
}

func (s *imageSource) Name() string        { return s.dir }
func (s *imageSource) DType() tensor.DType { return tensor.Float32 }
func (s *imageSource) Len() int            { return len(s.files) }
func (s *imageSource) Close() error        { s.closed = true; return nil }

func (s *imageSource) SampleShape() []int {
	if s.opt.Layout == "nhwc" {
		return []int{s.opt.Height, s.opt.Width, s.opt.Channels}
	}
	return []int{s.opt.Channels, s.opt.Height, s.opt.Width}
}

func (s *imageSource) Next(n int) (*tensor.Tensor, error) {
	if n <= 0 {
		return nil, fmt.Errorf("reading images in %q: batch size %d", s.dir, n)
	}
	if s.closed {
		return nil, fmt.Errorf("reading images in %q: %w", s.dir, errClosed)
	}
	if s.pos >= len(s.files) {
		return nil, io.EOF
	}
	k := min(n, len(s.files)-s.pos)
	per := s.opt.Channels * s.opt.Height * s.opt.Width
	data := make([]float32, k*per)
	for i := range k {
		if err := s.load(s.files[s.pos+i], data[i*per:(i+1)*per]); err != nil {
			return nil, err
		}
	}
	s.pos += k
	return &tensor.Tensor{DType: tensor.Float32, Shape: append([]int{k}, s.SampleShape()...), Data: data}, nil
}

// load decodes one file into dst (one sample).
func (s *imageSource) load(path string, dst []float32) error {
	f, err := os.Open(path)
	if err != nil {
		return fmt.Errorf("reading image %q: %w", path, err)
	}
	defer f.Close()
	cfg, format, err := image.DecodeConfig(f)
	if err != nil {
		return fmt.Errorf("reading image %q: not a decodable PNG or JPEG: %w", path, err)
	}
	if cfg.Width <= 0 || cfg.Height <= 0 || cfg.Width > MaxImageSide || cfg.Height > MaxImageSide || int64(cfg.Width)*int64(cfg.Height) > MaxImagePixels {
		return fmt.Errorf("reading image %q: %s of %d×%d pixels refused (limits: %d per side, %d in total)", path, format, cfg.Width, cfg.Height, MaxImageSide, MaxImagePixels)
	}
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return fmt.Errorf("reading image %q: %w", path, err)
	}
	img, _, err := image.Decode(f)
	if err != nil {
		return fmt.Errorf("reading image %q: %w", path, err)
	}
	if b := img.Bounds(); b.Dx() != cfg.Width || b.Dy() != cfg.Height {
		return fmt.Errorf("reading image %q: decoded size %v differs from its header %d×%d", path, b.Size(), cfg.Width, cfg.Height)
	}
	resizeBilinear(img, s.opt.Channels, s.opt.Height, s.opt.Width, s.opt.Layout == "nhwc", s.mean, s.std, dst)
	return nil
}
