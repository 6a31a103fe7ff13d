// Command synthetic-records trains a GAN on invented pump telemetry and
// writes synthetic records, reporting how close they are to held-out real
// records by the Fréchet distance between fitted Gaussians.
//
//	go run ./examples/synthetic-records            # writes synthetic.csv
//	go run ./examples/synthetic-records -short     # a smaller fleet, few epochs
//
// For scale it also reports the distance between two halves of the real
// records (what a perfect generator would reach, up to sampling noise) and
// for independent Gaussians matching each column's mean and spread (a
// generator that ignores how the columns move together).
package main

import (
	"context"
	"encoding/csv"
	"flag"
	"fmt"
	"log"
	"math"
	"math/rand/v2"
	"os"
	"strconv"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/demo/fleet"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/train"
)

func independentGaussians(d *data.Dataset, n int, seed uint64) []float32 {
	rng := rand.New(rand.NewPCG(seed, 9))
	mean := make([]float64, d.Cols)
	sd := make([]float64, d.Cols)
	for i := 0; i < d.Rows; i++ {
		for j, v := range d.Row(i) {
			mean[j] += float64(v) / float64(d.Rows)
		}
	}
	for i := 0; i < d.Rows; i++ {
		for j, v := range d.Row(i) {
			e := float64(v) - mean[j]
			sd[j] += e * e / float64(d.Rows-1)
		}
	}
	out := make([]float32, n*d.Cols)
	for i := range out {
		j := i % d.Cols
		out[i] = float32(mean[j] + math.Sqrt(sd[j])*rng.NormFloat64())
	}
	return out
}

func main() {
	short := flag.Bool("short", false, "a smaller fleet and few epochs")
	out := flag.String("out", "synthetic.csv", "CSV file for the synthetic records")
	flag.Parse()
	cfg, epochs := fleet.Config{Seed: 11}, 60
	if *short {
		cfg, epochs = fleet.Config{Pumps: 6, HistoryDays: 10, HoldoutDays: 1, Seed: 11}, 3
	}
	d := fleet.Dataset(fleet.Generate(cfg).History)
	d.Labels = nil
	tr, held, err := d.Split(0.3, rand.New(rand.NewPCG(2, 2)))
	if err != nil {
		log.Fatal(err)
	}
	m, err := gan.New(gan.Config{Outputs: 6, Noise: 8, GenHidden: []int{64, 64}, DiscHidden: []int{64, 64}, Pack: 2, Seed: 1})
	if err != nil {
		log.Fatal(err)
	}
	t, err := train.New(m, train.Settings{Epochs: epochs, BatchSize: 128, Optimizer: train.Optimizer{Rate: 1e-3}})
	if err != nil {
		log.Fatal(err)
	}
	h, err := t.Run(context.Background(), tr, nil)
	if err != nil {
		log.Fatal(err)
	}
	t.Release()
	n := held.Rows
	synth, err := m.Generate(n, 5, -1)
	if err != nil {
		log.Fatal(err)
	}
	fd, err := gan.FrechetRows(synth, n, held.X, n, 6)
	if err != nil {
		log.Fatal(err)
	}
	half := tr.Rows / 2
	floor, err := gan.FrechetRows(tr.X[:half*6], half, held.X, n, 6)
	if err != nil {
		log.Fatal(err)
	}
	indep, err := gan.FrechetRows(independentGaussians(tr, n, 3), n, held.X, n, 6)
	if err != nil {
		log.Fatal(err)
	}
	fmt.Printf("Fréchet distance to %d held-out real records (raw units):\n", n)
	fmt.Printf("  GAN samples                    %10.3f\n", fd)
	fmt.Printf("  real training records          %10.3f  (floor)\n", floor)
	fmt.Printf("  independent column Gaussians   %10.3f  (ignores correlations)\n", indep)
	if w := h.Warnings; len(w) > 0 {
		fmt.Printf("training warnings: %v\n", w)
	}
	f, err := os.Create(*out)
	if err != nil {
		log.Fatal(err)
	}
	cw := csv.NewWriter(f)
	cw.Write(fleet.Columns)
	for r := 0; r < n; r++ {
		rec := make([]string, 6)
		for j := range rec {
			rec[j] = strconv.FormatFloat(float64(synth[r*6+j]), 'f', 3, 32)
		}
		cw.Write(rec)
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		log.Fatal(err)
	}
	if err := f.Close(); err != nil {
		log.Fatal(err)
	}
	fmt.Printf("wrote %d synthetic records to %s\n", n, *out)
}
