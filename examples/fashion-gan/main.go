// Command fashion-gan trains a GAN on Fashion-MNIST images, writes a grid
// of samples and reports the Fréchet distance between generated and real
// test images on the features of an autoencoder's encoder.
//
//	go run ./examples/fashion-gan                  # the committed 2000-image subset
//	go run ./examples/fashion-gan -train DIR/train-images-idx3-ubyte.gz -test DIR/t10k-images-idx3-ubyte.gz
//	go run ./examples/fashion-gan -short           # a quick pass for CI
//	go run ./examples/fashion-gan -channels 32,64  # convolutions (see below)
//
// scripts/fetch-data.sh fetches the full set. For scale the program also
// reports the distance of real training images (a floor) and of uniform
// noise images (a ceiling) to the same test images.
//
// With -channels the discriminator reads the images through stride-2
// convolutions of those channels and the generator ends with their
// transposes, its noise going straight to the innermost feature maps
// (dense layers only between the convolutions and the output or the
// noise: none).
package main

import (
	"context"
	"flag"
	"fmt"
	"log"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/report"
	"github.com/quernlab/quern/train"
)

func main() {
	trainPath := flag.String("train", "testdata/fashion-mnist/train-images-idx3-ubyte-first2000.gz", "idx file of training images")
	testPath := flag.String("test", "testdata/fashion-mnist/t10k-images-idx3-ubyte-first500.gz", "idx file of test images")
	epochs := flag.Int("epochs", 100, "GAN training epochs")
	out := flag.String("out", "fashion-gan-out", "output folder")
	short := flag.Bool("short", false, "small networks and 1 epoch")
	channels := flag.String("channels", "", "comma-separated channels of the convolutions, from the image inward (for example 32,64; default none: dense layers)")
	flag.Parse()
	var chans []int
	for _, f := range strings.FieldsFunc(*channels, func(r rune) bool { return r == ',' }) {
		c, err := strconv.Atoi(strings.TrimSpace(f))
		if err != nil || c <= 0 {
			log.Fatalf("fashion-gan: -channels: %q is not a positive number of channels", f)
		}
		chans = append(chans, c)
	}
	start := time.Now()
	tr, err := data.LoadIDX(*trainPath, data.IDXConfig{})
	if err != nil {
		log.Fatal(err)
	}
	te, err := data.LoadIDX(*testPath, data.IDXConfig{})
	if err != nil {
		log.Fatal(err)
	}
	if err := os.MkdirAll(*out, 0o755); err != nil {
		log.Fatal(err)
	}
	gh, dh, encW, aeEpochs := []int{256, 512}, []int{512, 256}, []int{256}, 10
	if *short {
		gh, dh, encW, aeEpochs, *epochs = []int{32}, []int{32}, []int{32}, 1, 1
	}
	// feature encoder: an autoencoder trained on the training images
	enc, err := ae.New(ae.Config{Inputs: 784, Hidden: encW, Latent: 32, Loss: ae.BCE, Scaling: data.ScaleNone, Seed: 2})
	if err != nil {
		log.Fatal(err)
	}
	et, err := train.New(enc, train.Settings{Epochs: aeEpochs, BatchSize: 64})
	if err != nil {
		log.Fatal(err)
	}
	if _, err := et.Run(context.Background(), tr, nil); err != nil {
		log.Fatal(err)
	}
	et.Release()
	// the GAN: 64-256-512-784 generator, 784-512-256-1 discriminator, or
	// convolutions
	cfg := gan.Config{Outputs: 784, Noise: 64, GenHidden: gh, DiscHidden: dh, Activation: layers.LeakyReLU, LeakySlope: 0.2,
		GenOutput: layers.Sigmoid, Scaling: data.ScaleNone, Seed: 1}
	if len(chans) > 0 {
		cfg.Image, cfg.Channels, cfg.GenHidden, cfg.DiscHidden = tr.Image, chans, []int{}, []int{}
	}
	m, err := gan.New(cfg)
	if err != nil {
		log.Fatal(err)
	}
	gt, err := train.New(m, train.Settings{Epochs: *epochs, BatchSize: 64, Optimizer: train.Optimizer{Rate: 2e-4}})
	if err != nil {
		log.Fatal(err)
	}
	h, err := gt.Run(context.Background(), tr, nil)
	if err != nil {
		log.Fatal(err)
	}
	gt.Release()
	n := te.Rows
	samples, err := m.Generate(n, 3, -1)
	if err != nil {
		log.Fatal(err)
	}
	if err := report.ImageGrid(filepath.Join(*out, "samples.png"), samples[:64*784], 28, 28, 1, 8, 2); err != nil {
		log.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(4, 4))
	noise := make([]float32, n*784)
	for i := range noise {
		noise[i] = rng.Float32()
	}
	k := min(n, tr.Rows)
	fd := func(x []float32, rows int) float64 {
		d, err := gan.FrechetWith(enc.Encode, 32, x, rows, te.X, te.Rows)
		if err != nil {
			log.Fatal(err)
		}
		return d
	}
	fmt.Printf("Fréchet distance on the encoder's 32 features to %d test images:\n", te.Rows)
	fmt.Printf("  GAN samples (%d epochs)   %10.2f\n", *epochs, fd(samples, n))
	fmt.Printf("  real training images      %10.2f  (floor)\n", fd(tr.X[:k*784], k))
	fmt.Printf("  uniform noise images      %10.2f  (ceiling)\n", fd(noise, n))
	if w := h.Warnings; len(w) > 0 {
		fmt.Printf("training warnings: %d (first: %s)\n", len(w), w[0].Message)
	}
	fmt.Printf("wrote %s in %s\n", filepath.Join(*out, "samples.png"), time.Since(start).Round(time.Second))
}
