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
	for k := 0; k < n; k++ {
		ox, oy := pad+(k%cols)*(w*zoom+pad), pad+(k/cols)*(h*zoom+pad)
		im := rows[k*size : (k+1)*size]
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				col := pixel(im, y*w+x, c)
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

// pixel is the colour of pixel p of an image of c channels (1: grey, 3:
// red, green, blue) whose values are in [0, 1].
func pixel(im []float32, p, c int) color.RGBA {
	q := func(v float32) uint8 {
		if !(v > 0) {
			return 0
		}
		if v >= 1 {
			return 255
		}
		return uint8(v*255 + 0.5)
	}
	if c == 1 {
		g := q(im[p])
		return color.RGBA{g, g, g, 255}
	}
	return color.RGBA{q(im[p*3]), q(im[p*3+1]), q(im[p*3+2]), 255}
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

// heatStops are the colours of HeatMap's scale from none (white) through
// yellow and orange to the largest (dark red), evenly spaced.
var heatStops = [...][3]float64{{255, 255, 255}, {255, 237, 160}, {254, 178, 76}, {240, 59, 32}, {128, 0, 38}}

// heatColour is the colour of v in [0, 1] on the heat scale.
func heatColour(v float64) color.RGBA {
	if !(v > 0) {
		v = 0
	}
	v = min(v, 1) * float64(len(heatStops)-1)
	i := min(int(v), len(heatStops)-2)
	f := v - float64(i)
	var c [3]uint8
	for k := range c {
		c[k] = uint8(heatStops[i][k]*(1-f) + heatStops[i+1][k]*f + 0.5)
	}
	return color.RGBA{c[0], c[1], c[2], 255}
}

// HeatMap writes one image (h x w x c values in [0, 1]) and, to its
// right, the map of its per-value contributions to a score (one per
// value of the image; a pixel's is the sum over its channels), as a PNG
// scaled up by zoom. The map runs from white (no contribution, or a
// negative one) to dark red (scale or more); it returns the largest
// pixel's contribution. scale 0 takes that largest one, so that each map
// shows where its own image departs most.
func HeatMap(path string, img []float32, contrib []float64, h, w, c, zoom int, scale float64) (float64, error) {
	size := h * w * c
	if size == 0 || len(img) != size || len(contrib) != size || (c != 1 && c != 3) {
		return 0, fmt.Errorf("report: %d values and %d contributions are not an image of %dx%dx%d", len(img), len(contrib), h, w, c)
	}
	zoom = max(zoom, 1)
	part := make([]float64, h*w)
	largest := 0.0
	for p := range part {
		for k := 0; k < c; k++ {
			part[p] += contrib[p*c+k]
		}
		if part[p] > largest {
			largest = part[p]
		}
	}
	if scale <= 0 {
		scale = largest
	}
	pad := 2
	out := image.NewRGBA(image.Rect(0, 0, 2*w*zoom+3*pad, h*zoom+2*pad))
	for i := range out.Pix {
		out.Pix[i] = 255
	}
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			left := pixel(img, y*w+x, c)
			right := heatColour(0)
			if scale > 0 {
				right = heatColour(part[y*w+x] / scale)
			}
			for dy := 0; dy < zoom; dy++ {
				for dx := 0; dx < zoom; dx++ {
					out.SetRGBA(pad+x*zoom+dx, pad+y*zoom+dy, left)
					out.SetRGBA(2*pad+w*zoom+x*zoom+dx, pad+y*zoom+dy, right)
				}
			}
		}
	}
	f, err := os.Create(path)
	if err != nil {
		return largest, fmt.Errorf("report: %w", err)
	}
	if err := png.Encode(f, out); err != nil {
		f.Close()
		return largest, fmt.Errorf("report: %w", err)
	}
	return largest, f.Close()
}
