package report

import (
	"fmt"
	"image"
	"image/color"
	"image/png"
	"os"
)

// ImageGrid writes rows of image values in [0, 1] (h x w x c each) as one
// PNG grid with cols images per row, each scaled up by zoom.
func ImageGrid(path string, rows []float32, h, w, c, cols, zoom int) error {
	size := h * w * c
	if size == 0 || len(rows)%size != 0 || (c != 1 && c != 3) {
		return fmt.Errorf("report: %d values are not images of %dx%dx%d", len(rows), h, w, c)
	}
	n := len(rows) / size
	cols = max(1, min(cols, n))
	zoom = max(zoom, 1)
	gridRows := (n + cols - 1) / cols
	pad := 2
	img := image.NewRGBA(image.Rect(0, 0, cols*(w*zoom+pad)+pad, gridRows*(h*zoom+pad)+pad))
	for i := range img.Pix {
		img.Pix[i] = 255
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
	for k := 0; k < n; k++ {
		ox, oy := pad+(k%cols)*(w*zoom+pad), pad+(k/cols)*(h*zoom+pad)
		im := rows[k*size : (k+1)*size]
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				var col color.RGBA
				if c == 1 {
					g := q(im[y*w+x])
					col = color.RGBA{g, g, g, 255}
				} else {
					b := (y*w + x) * 3
					col = color.RGBA{q(im[b]), q(im[b+1]), q(im[b+2]), 255}
				}
				for dy := 0; dy < zoom; dy++ {
					for dx := 0; dx < zoom; dx++ {
						img.SetRGBA(ox+x*zoom+dx, oy+y*zoom+dy, col)
					}
				}
			}
		}
	}
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if err := png.Encode(f, img); err != nil {
		f.Close()
		return fmt.Errorf("report: %w", err)
	}
	return f.Close()
}

// FirstTwo keeps the first two columns of rows of width w (a zero second
// column when w is 1), for LatentScatter.
func FirstTwo(x []float32, rows, w int) []float32 {
	out := make([]float32, 0, 2*rows)
	for r := 0; r < rows; r++ {
		a, b := x[r*w], float32(0)
		if w > 1 {
			b = x[r*w+1]
		}
		out = append(out, a, b)
	}
	return out
}
