// Command image-vae trains a VAE on a folder of PNG images, then writes
// samples from the prior and a spherical interpolation between two images
// as PNG grids.
//
//	go run ./examples/image-vae -images DIR -out OUT
//	go run ./examples/image-vae -short          # invents a folder of dial images first
//
// Without -images it draws its own data set: 16x16 images of an invented
// pressure gauge whose needle points anywhere on its dial, so a 2-D latent
// space has a needle angle to find.
package main

import (
	"context"
	"flag"
	"fmt"
	"log"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/report"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
)

// drawGauges writes n gauge images with needles at random angles.
func drawGauges(dir string, n int, seed uint64) error {
	rng := rand.New(rand.NewPCG(seed, 5))
	const size = 16
	for i := 0; i < n; i++ {
		img := make([]float32, size*size)
		angle := (0.75 + 1.5*rng.Float64()) * math.Pi // the dial spans 270 degrees
		for y := 0; y < size; y++ {
			for x := 0; x < size; x++ {
				dx, dy := float64(x)-7.5, float64(y)-7.5
				r := math.Hypot(dx, dy)
				v := 0.0
				if math.Abs(r-7) < 0.6 {
					v = 0.5 // the rim
				}
				// distance from the needle segment
				t := dx*math.Cos(angle) + dy*math.Sin(angle)
				perp := math.Abs(-dx*math.Sin(angle) + dy*math.Cos(angle))
				if t > 0 && t < 6 && perp < 0.8 {
					v = 1
				}
				img[y*size+x] = float32(v)
			}
		}
		if err := data.WritePNG(filepath.Join(dir, fmt.Sprintf("gauge%04d.png", i)), img, size, size, 1); err != nil {
			return err
		}
	}
	return nil
}

func main() {
	images := flag.String("images", "", "folder of PNG images (default: draw gauge images)")
	out := flag.String("out", "image-vae-out", "output folder")
	short := flag.Bool("short", false, "a small data set and few epochs")
	flag.Parse()
	if err := os.MkdirAll(*out, 0o755); err != nil {
		log.Fatal(err)
	}
	n, epochs := 3000, 40
	if *short {
		n, epochs = 400, 3
	}
	if *images == "" {
		*images = filepath.Join(*out, "gauges")
		if err := os.MkdirAll(*images, 0o755); err != nil {
			log.Fatal(err)
		}
		if err := drawGauges(*images, n, 1); err != nil {
			log.Fatal(err)
		}
	}
	d, _, err := data.LoadImages(*images, data.ImageConfig{Grey: true})
	if err != nil {
		log.Fatal(err)
	}
	m, err := vae.New(vae.Config{Inputs: d.Cols, Hidden: []int{128}, Latent: 2, Seed: 1})
	if err != nil {
		log.Fatal(err)
	}
	t, err := train.New(m, train.Settings{Epochs: epochs, BatchSize: 64})
	if err != nil {
		log.Fatal(err)
	}
	h, err := t.Run(context.Background(), d, nil)
	if err != nil {
		log.Fatal(err)
	}
	t.Release()
	tl, _ := h.Loss(len(h.Epochs))
	k := min(d.Rows, 500)
	elbo, err := m.ELBO(d.X[:k*d.Cols], k, 10, 1)
	if err != nil {
		log.Fatal(err)
	}
	var mean float64
	for _, e := range elbo {
		mean += e / float64(len(elbo))
	}
	hgt, wid, ch := d.Image[0], d.Image[1], d.Image[2]
	samples, err := m.Sample(32, 7)
	if err != nil {
		log.Fatal(err)
	}
	if err := report.ImageGrid(filepath.Join(*out, "samples.png"), samples, hgt, wid, ch, 8, 4); err != nil {
		log.Fatal(err)
	}
	walk, err := m.Interpolate(d.Row(0), d.Row(1), 10, vae.Slerp)
	if err != nil {
		log.Fatal(err)
	}
	ends := append(append(append([]float32(nil), d.Row(0)...), walk...), d.Row(1)...)
	if err := report.ImageGrid(filepath.Join(*out, "interpolation.png"), ends, hgt, wid, ch, 12, 4); err != nil {
		log.Fatal(err)
	}
	fmt.Printf("trained on %d images of %dx%d for %d epochs: final loss %.2f nats, ELBO %.2f nats per image\n", d.Rows, hgt, wid, epochs, tl, mean)
	fmt.Printf("wrote %s and %s\n", filepath.Join(*out, "samples.png"), filepath.Join(*out, "interpolation.png"))
}
