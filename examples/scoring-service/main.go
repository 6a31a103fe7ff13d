// Command scoring-service embeds a trained autoencoder in an HTTP service
// of its own that scores JSON pump records concurrently.
//
//	go run ./examples/scoring-service            # train, then serve on 127.0.0.1:8418
//	go run ./examples/scoring-service -short     # train briefly, score a few records, exit
//
// The model's inference methods need no graph and are safe for concurrent
// use, so one model serves every request goroutine.
package main

import (
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"log"
	"math/rand/v2"
	"net"
	"net/http"
	"sync"
	"time"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/demo/fleet"
	"github.com/quernlab/quern/train"
)

// record is one reading as the service receives it.
type record struct {
	Pump        int     `json:"pump"`
	Vibration   float64 `json:"vibration_mm_s"`
	BearingTemp float64 `json:"bearing_temp_c"`
	Flow        float64 `json:"flow_m3_h"`
	Current     float64 `json:"motor_current_a"`
	Suction     float64 `json:"suction_kpa"`
	Discharge   float64 `json:"discharge_kpa"`
}

type verdict struct {
	Pump    int     `json:"pump"`
	Score   float64 `json:"score"`
	Alarm   bool    `json:"alarm"`
	Because string  `json:"because"`
	Caution string  `json:"caution"`
}

func handler(m *ae.Model) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		var rec record
		if err := json.NewDecoder(http.MaxBytesReader(w, r.Body, 1<<16)).Decode(&rec); err != nil {
			http.Error(w, `{"error":"malformed record"}`, http.StatusBadRequest)
			return
		}
		x := []float32{float32(rec.Vibration), float32(rec.BearingTemp), float32(rec.Flow), float32(rec.Current), float32(rec.Suction), float32(rec.Discharge)}
		s, err := m.Score(x, 1, 1)
		if err != nil {
			http.Error(w, fmt.Sprintf(`{"error":%q}`, err.Error()), http.StatusBadRequest)
			return
		}
		w.Header().Set("Content-Type", "application/json")
		json.NewEncoder(w).Encode(verdict{Pump: rec.Pump, Score: s[0].Value, Alarm: s[0].Anomaly, Because: s[0].Top[0].Name, Caution: ae.Caution})
	}
}

func main() {
	short := flag.Bool("short", false, "train briefly, score a few records concurrently and exit")
	addr := flag.String("addr", "127.0.0.1:8418", "listen address")
	flag.Parse()
	cfg := fleet.Config{Seed: 3}
	epochs := 20
	if *short {
		cfg = fleet.Config{Pumps: 6, HistoryDays: 7, HoldoutDays: 3, Seed: 3}
		epochs = 3
	}
	fl := fleet.Generate(cfg)
	hist := fleet.Dataset(fl.History)
	hist.Labels = nil
	tr, calib, err := hist.Split(0.2, rand.New(rand.NewPCG(1, 1)))
	if err != nil {
		log.Fatal(err)
	}
	m, err := ae.New(ae.Config{Inputs: 6, Hidden: []int{32, 16}, Latent: 3, Seed: 1})
	if err != nil {
		log.Fatal(err)
	}
	t, err := train.New(m, train.Settings{Epochs: epochs})
	if err != nil {
		log.Fatal(err)
	}
	if _, err := t.Run(context.Background(), tr, nil); err != nil {
		log.Fatal(err)
	}
	t.Release()
	if _, err := m.Calibrate(calib.X, calib.Rows, anomaly.Config{FalseAlarm: 0.01}); err != nil {
		log.Fatal(err)
	}
	if *short {
		*addr = "127.0.0.1:0" // any free port
	}
	ln, err := net.Listen("tcp", *addr)
	if err != nil {
		log.Fatal(err)
	}
	mux := http.NewServeMux()
	mux.HandleFunc("POST /pumps/score", handler(m))
	srv := &http.Server{Handler: mux, ReadTimeout: 5 * time.Second, WriteTimeout: 5 * time.Second}
	go srv.Serve(ln)
	fmt.Printf("scoring pump records on http://%s/pumps/score\n", ln.Addr())
	if !*short {
		select {}
	}
	// send the hold-out readings taken at 06:00 each day, concurrently
	var wg sync.WaitGroup
	var mu sync.Mutex
	alarms, total := 0, 0
	for _, r := range fl.Holdout {
		if r.Hour%24 != 6 {
			continue
		}
		wg.Add(1)
		go func(r fleet.Reading) {
			defer wg.Done()
			body, _ := json.Marshal(record{r.Pump, r.X[0], r.X[1], r.X[2], r.X[3], r.X[4], r.X[5]})
			resp, err := http.Post("http://"+ln.Addr().String()+"/pumps/score", "application/json", bytes.NewReader(body))
			if err != nil {
				log.Fatal(err)
			}
			defer resp.Body.Close()
			var v verdict
			if err := json.NewDecoder(resp.Body).Decode(&v); err != nil {
				log.Fatal(err)
			}
			mu.Lock()
			total++
			if v.Alarm {
				alarms++
			}
			mu.Unlock()
		}(r)
	}
	wg.Wait()
	fmt.Printf("scored %d records concurrently, %d alarms\n%s\n", total, alarms, ae.Caution)
	srv.Close()
}
