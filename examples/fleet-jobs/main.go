// Command fleet-jobs trains a fleet of models as an array job would, on
// one machine, then uses the fleet from Go.
//
// The invented scenario: a network of parcel-locker stations, each
// logging, every ten minutes, its compartments' mean temperature, the
// door openings, the battery's voltage, the heater's duty and the
// modem's signal. What is normal differs by station (sun, shade, foot
// traffic), so each station gets its own autoencoder.
//
// The program writes the stations' log as CSV, then starts the shards
// of `quern train -group station -shard I/N` as separate processes, as
// a Kubernetes Indexed Job (indexed-job.yaml) or a Slurm job array
// (slurm-array.sh) would on many machines, each into its own folder;
// `quern merge` assembles the fleet. It then opens the fleet with
// fleet.Open and scores new readings, each routed to its station's
// model (a station it has never seen goes to the shared model):
//
//	go run ./examples/fleet-jobs                  # 60 stations, 4 shards
//	go run ./examples/fleet-jobs -short           # 8 stations, fewer rows
package main

import (
	"bufio"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/fleet"
	"github.com/quernlab/quern/model"
)

func main() {
	short := flag.Bool("short", false, "a small fleet, quickly")
	stations := flag.Int("stations", 60, "stations in the network")
	shards := flag.Int("shards", 4, "shards of the array job")
	out := flag.String("out", "", "folder for the log, the shards and the fleet (default: a temporary folder, removed at the end)")
	seed := flag.Uint64("seed", 1, "seed of the invented log and of the fleet")
	flag.Parse()
	readings := 600 // per station: about four days
	if *short {
		*stations, readings = 8, 300
	}
	if err := run(*out, *stations, readings, *shards, *seed); err != nil {
		fmt.Fprintln(os.Stderr, "fleet-jobs:", err)
		os.Exit(1)
	}
}

var columns = []string{"temp_c", "door_openings", "battery_v", "heater_duty", "signal_dbm"}

// station is what makes one station's normal its own.
type station struct {
	name                   string
	sun, traffic, coldness float64
}

func stationsOf(n int, rng *rand.Rand) []station {
	out := make([]station, n)
	for i := range out {
		out[i] = station{fmt.Sprintf("st-%03d", i+1), rng.Float64(), 0.2 + 2*rng.Float64(), rng.Float64()}
	}
	return out
}

// reading is one station's log line at step t (ten-minute steps).
func (s station) reading(t int, rng *rand.Rand) []float64 {
	day := math.Sin(2 * math.Pi * float64(t) / 144)
	temp := 8 - 6*s.coldness + 5*s.sun*day + 0.4*rng.NormFloat64()
	doors := math.Max(0, math.Round(s.traffic*(3+2*day)+rng.NormFloat64()))
	heater := math.Max(0, math.Min(1, 0.5-0.08*temp+0.05*rng.NormFloat64()))
	battery := 12.6 - 0.6*heater - 0.03*doors + 0.05*rng.NormFloat64()
	signal := -70 - 10*s.coldness + 2*rng.NormFloat64()
	return []float64{temp, doors, battery, heater, signal}
}

func run(dir string, n, readings, shards int, seed uint64) error {
	if dir == "" {
		tmp, err := os.MkdirTemp("", "fleet-jobs")
		if err != nil {
			return err
		}
		defer os.RemoveAll(tmp)
		dir = tmp
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	rng := rand.New(rand.NewPCG(seed, 0x10c))
	sts := stationsOf(n, rng)
	log := filepath.Join(dir, "stations.csv")
	if err := writeLog(log, sts, readings, rng); err != nil {
		return err
	}
	// the quern command, built from this module
	quern := filepath.Join(dir, "quern")
	if b, err := exec.Command("go", "build", "-o", quern, "github.com/quernlab/quern/cmd/quern").CombinedOutput(); err != nil {
		return fmt.Errorf("building quern: %v\n%s", err, b)
	}
	// the array job: every shard its own process and folder, as on its
	// own machine
	args := []string{"train", "-data", log, "-group", "station", "-columns", strings.Join(columns, ","), "-hidden", "8", "-latent", "2", "-epochs", "20", "-folds", "0", "-min-rows", "100", "-shared", "2000", "-seed", fmt.Sprint(seed), "-quiet"}
	var wg sync.WaitGroup
	errs := make([]error, shards)
	folders := make([]string, shards)
	for i := range shards {
		folders[i] = filepath.Join(dir, fmt.Sprintf("shard-%d", i))
		wg.Add(1)
		go func() {
			defer wg.Done()
			a := append(args[:len(args):len(args)], "-shard", fmt.Sprintf("%d/%d", i, shards), "-out", folders[i])
			if b, err := exec.Command(quern, a...).CombinedOutput(); err != nil {
				errs[i] = fmt.Errorf("shard %d: %v\n%s", i, err, b)
			}
		}()
	}
	wg.Wait()
	for _, err := range errs {
		if err != nil {
			return err
		}
	}
	fleetDir := filepath.Join(dir, "fleet")
	b, err := exec.Command(quern, append([]string{"merge", "-out", fleetDir}, folders...)...).CombinedOutput()
	if err != nil {
		return fmt.Errorf("merge: %v\n%s", err, b)
	}
	fmt.Printf("%s", b)

	// the fleet in a Go service: opened once, used from any goroutine
	f, err := fleet.Open(fleetDir)
	if err != nil {
		return err
	}
	ix := f.Index()
	fmt.Printf("opened %d station models and a shared model; thresholds from %.3g to %.3g\n", f.Len(), lowest(ix), highest(ix))
	probe := rand.New(rand.NewPCG(seed, 0x9e7))
	cases := []struct {
		what    string
		station string
		row     []float64
	}{
		{"a normal reading", sts[0].name, sts[0].reading(7, probe)},
		{"the heater stuck on", sts[1].name, func() []float64 { r := sts[1].reading(9, probe); r[3], r[2] = 1, r[2]-0.6; return r }()},
		{"the coldest station's reading, at the warmest", warmest(sts).name, coldest(sts).reading(20, probe)},
		{"a new station, not in the log", "st-new", sts[3].reading(11, probe)},
	}
	for _, c := range cases {
		e, shared, _ := f.Route(c.station)
		x := make([]float32, len(c.row))
		for i, v := range c.row {
			x[i] = float32(v)
		}
		res, err := e.Value.(model.Scorer).Score(x, 1, 1)
		if err != nil {
			return err
		}
		by := "its own model"
		if shared {
			by = "the shared model"
		}
		flag := "normal"
		if res[0].Anomaly {
			flag = "FLAGGED"
		}
		fmt.Printf("%-56s %-7s score %8.3f against %.3f (%s; most unusual: %s)\n", c.what+" ("+c.station+")", flag, res[0].Value, res[0].Threshold, by, res[0].Top[0].Name)
	}
	fmt.Println(anomaly.Caution)
	return nil
}

// coldest and warmest are the stations at the extremes of coldness: a
// normal reading of one is not normal at the other.
func coldest(sts []station) station {
	c := sts[0]
	for _, s := range sts {
		if s.coldness > c.coldness {
			c = s
		}
	}
	return c
}

func warmest(sts []station) station {
	w := sts[0]
	for _, s := range sts {
		if s.coldness < w.coldness {
			w = s
		}
	}
	return w
}

func lowest(ix *fleet.Index) float64 {
	v := math.Inf(1)
	for _, m := range ix.Members {
		if m.Threshold != nil {
			v = math.Min(v, *m.Threshold)
		}
	}
	return v
}

func highest(ix *fleet.Index) float64 {
	v := math.Inf(-1)
	for _, m := range ix.Members {
		if m.Threshold != nil {
			v = math.Max(v, *m.Threshold)
		}
	}
	return v
}

func writeLog(path string, sts []station, readings int, rng *rand.Rand) error {
	fh, err := os.Create(path)
	if err != nil {
		return err
	}
	w := bufio.NewWriter(fh)
	fmt.Fprint(w, "station,step")
	for _, c := range columns {
		fmt.Fprint(w, ",", c)
	}
	fmt.Fprintln(w)
	for t := range readings {
		for _, s := range sts {
			fmt.Fprintf(w, "%s,%d", s.name, t)
			for _, v := range s.reading(t, rng) {
				fmt.Fprintf(w, ",%.4g", v)
			}
			fmt.Fprintln(w)
		}
	}
	if err := w.Flush(); err != nil {
		fh.Close()
		return err
	}
	return fh.Close()
}
