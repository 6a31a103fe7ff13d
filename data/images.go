package data

import (
	"fmt"
	"image"
	"image/color"
	"image/png"
	"os"
	"path/filepath"
	"sort"
	"strings"
)

// ImageConfig configures LoadImages. The zero value keeps each image's own
// colour mode (grey stays one channel, anything else becomes RGB).
type ImageConfig struct {
	// Grey converts every image to one grey channel.
	Grey bool
	// Limits caps the number of images, each one's pixels, and the
	// values of all of them.
	Limits Limits
	// Progress, when not nil, is told how many of the images have been
	// read.
	Progress Progress
}

// LoadImages reads every .png file in dir (sorted by name) as one row of
// values in [0, 1]. All images must share one size and one colour mode
// (grey or RGB; alpha is dropped); a mismatch is a *ParseError naming the
// file. When dir holds only subfolders, each subfolder is a class: its
// images get the subfolder's index in name order as their label, and
// Columns is left nil while the class names are returned in ClassNames.
func LoadImages(dir string, cfg ImageConfig) (*Dataset, []string, error) {
	lim, err := cfg.Limits.resolve()
	if err != nil {
		return nil, nil, err
	}
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, nil, fmt.Errorf("data: %w", err)
	}
	var files []string
	var labels []int
	var classes []string
	allDirs := len(entries) > 0
	for _, e := range entries {
		if !e.IsDir() && !strings.HasPrefix(e.Name(), ".") {
			allDirs = false
		}
	}
	if allDirs {
		for _, e := range entries {
			if strings.HasPrefix(e.Name(), ".") {
				continue
			}
			sub, err := os.ReadDir(filepath.Join(dir, e.Name()))
			if err != nil {
				return nil, nil, fmt.Errorf("data: %w", err)
			}
			n := 0
			for _, f := range sub {
				if !f.IsDir() && strings.EqualFold(filepath.Ext(f.Name()), ".png") {
					files = append(files, filepath.Join(dir, e.Name(), f.Name()))
					labels = append(labels, len(classes))
					n++
				}
			}
			if n > 0 {
				classes = append(classes, e.Name())
			}
		}
	} else {
		for _, e := range entries {
			if !e.IsDir() && strings.EqualFold(filepath.Ext(e.Name()), ".png") {
				files = append(files, filepath.Join(dir, e.Name()))
			}
		}
		sort.Strings(files)
		labels = nil
	}
	if len(files) == 0 {
		return nil, nil, &ParseError{File: dir, Msg: "no .png images"}
	}
	if len(files) > lim.Images || len(files) > lim.Rows {
		n := min(lim.Images, lim.Rows)
		key := "images"
		if lim.Rows < lim.Images {
			key = "rows"
		}
		return nil, nil, &LimitError{File: dir, Key: key, Limit: int64(n), What: fmt.Sprintf("%d images", len(files))}
	}
	d := &Dataset{}
	var w, h, ch int
	for k, f := range files {
		img, err := readPNG(f, lim.Pixels)
		if err != nil {
			return nil, nil, err
		}
		if cfg.Progress != nil && (k%256 == 255 || k == len(files)-1) {
			cfg.Progress(int64(k+1), int64(len(files)))
		}
		b := img.Bounds()
		c := 3
		if cfg.Grey || isGrey(img) {
			c = 1
		}
		if k == 0 {
			w, h, ch = b.Dx(), b.Dy(), c
			d.Cols = w * h * ch
			d.Image = []int{h, w, ch}
			if all := int64(len(files)) * int64(d.Cols); all > lim.Values {
				return nil, nil, &LimitError{File: dir, Key: "values", Limit: lim.Values, What: fmt.Sprintf("%d images of %dx%dx%d (height, width, channels) make %d values", len(files), h, w, ch, all)}
			}
			d.X = make([]float32, 0, len(files)*d.Cols)
		} else if b.Dx() != w || b.Dy() != h {
			return nil, nil, &ParseError{File: f, Msg: fmt.Sprintf("image is %dx%d, the others are %dx%d (width x height)", b.Dx(), b.Dy(), w, h)}
		} else if c != ch {
			return nil, nil, &ParseError{File: f, Msg: fmt.Sprintf("image has %d channel(s), the others have %d", c, ch)}
		}
		for y := b.Min.Y; y < b.Max.Y; y++ {
			for x := b.Min.X; x < b.Max.X; x++ {
				if ch == 1 {
					g := color.Gray16Model.Convert(img.At(x, y)).(color.Gray16)
					d.X = append(d.X, float32(g.Y)/65535)
				} else {
					r, g, bl, _ := img.At(x, y).RGBA()
					d.X = append(d.X, float32(r)/65535, float32(g)/65535, float32(bl)/65535)
				}
			}
		}
		d.Rows++
	}
	d.Labels = labels
	return d, classes, nil
}

func isGrey(img image.Image) bool {
	switch img.ColorModel() {
	case color.GrayModel, color.Gray16Model:
		return true
	}
	return false
}

func readPNG(path string, maxPixels int) (image.Image, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("data: %w", err)
	}
	defer f.Close()
	// Check the declared size before decoding, so that a hostile header
	// cannot demand a huge allocation.
	cfg, err := png.DecodeConfig(f)
	if err != nil {
		return nil, &ParseError{File: path, Msg: "not a readable PNG: " + err.Error()}
	}
	if cfg.Width <= 0 || cfg.Height <= 0 {
		return nil, &ParseError{File: path, Msg: fmt.Sprintf("image size %dx%d is out of range", cfg.Width, cfg.Height)}
	}
	if int64(cfg.Width)*int64(cfg.Height) > int64(maxPixels) {
		return nil, &LimitError{File: path, Key: "pixels", Limit: int64(maxPixels), What: fmt.Sprintf("an image of %dx%d pixels", cfg.Width, cfg.Height)}
	}
	if _, err := f.Seek(0, 0); err != nil {
		return nil, fmt.Errorf("data: %w", err)
	}
	img, err := png.Decode(f)
	if err != nil {
		return nil, &ParseError{File: path, Msg: "not a readable PNG: " + err.Error()}
	}
	return img, nil
}

// WritePNG writes rows of an image dataset's values in [0, 1] (h x w x c,
// c = 1 or 3) as a PNG; values outside [0, 1] are clipped.
func WritePNG(path string, values []float32, h, w, c int) error {
	if len(values) != h*w*c || (c != 1 && c != 3) {
		return fmt.Errorf("data: %d values do not make a %dx%dx%d image", len(values), h, w, c)
	}
	q := func(v float32) uint8 {
		if !(v > 0) {
			return 0
		}
		if v >= 1 {
			return 255
		}
		return uint8(v*255 + 0.5)
	}
	var img image.Image
	if c == 1 {
		g := image.NewGray(image.Rect(0, 0, w, h))
		for i, v := range values {
			g.Pix[i] = q(v)
		}
		img = g
	} else {
		rgb := image.NewNRGBA(image.Rect(0, 0, w, h))
		for i := 0; i < h*w; i++ {
			rgb.Pix[4*i], rgb.Pix[4*i+1], rgb.Pix[4*i+2], rgb.Pix[4*i+3] = q(values[3*i]), q(values[3*i+1]), q(values[3*i+2]), 255
		}
		img = rgb
	}
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("data: %w", err)
	}
	if err := png.Encode(f, img); err != nil {
		f.Close()
		return fmt.Errorf("data: %s: %w", path, err)
	}
	return f.Close()
}
