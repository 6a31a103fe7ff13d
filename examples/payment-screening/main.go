// Command payment-screening trains an autoencoder on an invented table of
// card payments (text categories, a yes/no column, identifiers, times and
// empty cells: package demo/payments) and screens new payments, given as
// the cells a service receives, one at a time: each gets a score against
// a calibrated threshold, the columns behind it with what the model
// expected there, and what reading its cells found.
//
//	go run ./examples/payment-screening          # 8000 payments of history
//	go run ./examples/payment-screening -short   # 3000, fewer epochs (CI)
//
// The identifier, time and device columns are left out of the model (a
// typed reading says so); a level never seen in training, such as a new
// country, is reported with the score, never an error.
package main

import (
	"bytes"
	"context"
	"flag"
	"fmt"
	"log"
	"math/rand/v2"
	"strings"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/demo/payments"
	"github.com/quernlab/quern/train"
)

func main() {
	short := flag.Bool("short", false, "less history and fewer epochs")
	flag.Parse()
	rows, epochs := 8000, 30
	if *short {
		rows, epochs = 3000, 10
	}
	// the history a payments service would export as CSV
	tb := payments.Generate(payments.Config{History: rows, Holdout: 1, Seed: 3})
	var csv bytes.Buffer
	if err := payments.Write(&csv, tb.History, false); err != nil {
		log.Fatal(err)
	}
	history, err := data.ReadCSV(&csv, "payments.csv", data.CSVConfig{Typed: true})
	if err != nil {
		log.Fatal(err)
	}
	for _, s := range history.LeftOut {
		fmt.Println("read by type:", s)
	}
	trainSet, calib, err := history.Split(0.2, rand.New(rand.NewPCG(3, 1)))
	if err != nil {
		log.Fatal(err)
	}
	m, err := ae.New(ae.Config{Inputs: history.Cols, Hidden: []int{32}, Latent: 6, Seed: 3, Categories: history.Encoding.CategorySpans()})
	if err != nil {
		log.Fatal(err)
	}
	t, err := train.New(m, train.Settings{Epochs: epochs, Patience: 5, BatchSize: 128, Optimizer: train.Optimizer{Rate: 3e-3}})
	if err != nil {
		log.Fatal(err)
	}
	if _, err := t.Run(context.Background(), trainSet, calib); err != nil {
		log.Fatal(err)
	}
	if err := m.FitProfile(trainSet.X, trainSet.Rows); err != nil {
		log.Fatal(err)
	}
	th, err := m.Calibrate(calib.X, calib.Rows, anomaly.Config{FalseAlarm: 0.01})
	if err != nil {
		log.Fatal(err)
	}
	fmt.Printf("threshold %.4g: expected false-alarm rate %.2f%%, below %.2f%% with %.0f%% confidence\n\n",
		th.Value, 100*th.ExpectedFalseAlarm, 100*th.FalseAlarmBound, 100*anomaly.BoundConfidence)

	// new payments as a service receives them, keyed by column name; the
	// encoder reads them by the model's own encoding, in its order
	enc, err := data.NewRowEncoder(m.Encoding)
	if err != nil {
		log.Fatal(err)
	}
	incoming := []map[string]string{
		{"payment_id": "pay-a", "merchant_category": "grocery", "channel": "contactless", "country": "FR", "amount_eur": "23.40", "card_present": "yes"},
		{"payment_id": "pay-b", "merchant_category": "grocery", "channel": "contactless", "country": "FR", "amount_eur": "286.00", "card_present": "yes"},
		{"payment_id": "pay-c", "merchant_category": "digital_services", "channel": "online", "country": "VN", "amount_eur": "0.89", "card_present": "no"},
		{"payment_id": "pay-d", "merchant_category": "electronics", "channel": "online", "country": "FR", "amount_eur": "2399.99", "card_present": "no"},
		{"payment_id": "pay-e", "merchant_category": "restaurant", "channel": "chip", "country": "", "amount_eur": "", "card_present": "yes"},
	}
	names := m.Encoding.Names()
	cells := make([]string, len(names))
	var x []float32
	for _, rec := range incoming {
		for i, n := range names {
			cells[i] = rec[n]
		}
		var note string
		var unscorable bool
		x, note, unscorable = enc.Encode(x[:0], cells)
		if unscorable {
			fmt.Printf("%s: unscorable (%s): flagged for review\n", rec["payment_id"], note)
			continue
		}
		s, err := m.Score(x, 1, 2)
		if err != nil {
			log.Fatal(err)
		}
		verdict := "passes"
		if s[0].Anomaly {
			verdict = "FLAGGED"
		}
		var why []string
		for _, f := range s[0].Top {
			w := fmt.Sprintf("%s %.0f%%", f.Name, 100*f.Share)
			if f.Expected != "" {
				w += fmt.Sprintf(" (expected %s", f.Expected)
				if f.Direction != "" {
					w += ", " + f.Direction
				}
				w += ")"
			}
			why = append(why, w)
		}
		fmt.Printf("%s: score %.3g %s; %s", rec["payment_id"], s[0].Value, verdict, strings.Join(why, "; "))
		if note != "" {
			fmt.Printf("; read: %s", note)
		}
		fmt.Println()
	}
	fmt.Println()
	fmt.Println(anomaly.Caution)
}
