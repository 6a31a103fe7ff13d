package fleet

import (
	"math"
	"math/rand/v2"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/stream"
)

// Columns are the telemetry fields, in order.
var Columns = []string{"vibration_mm_s", "bearing_temp_c", "flow_m3_h", "motor_current_a", "suction_kpa", "discharge_kpa"}

// Fault kinds, as recorded in Reading.Fault.
const (
	Healthy     = ""
	BearingWear = "bearing_wear" // vibration and bearing temperature drift upward
	Cavitation  = "cavitation"   // suction pressure collapses, vibration bursts, flow wavers
	StuckSensor = "stuck_sensor" // the flow meter repeats one value while the pump works on
)

// Config sizes the fleet. Zero fields mean: 24 pumps, 21 days of history
// and 7 days of hold-out week.
type Config struct {
	Pumps       int
	HistoryDays int
	HoldoutDays int
	Seed        uint64
}

// Reading is one hourly record.
type Reading struct {
	Pump  int
	Hour  int
	X     [6]float64
	Fault string
}

// Fleet is a generated scenario: healthy history for training and a
// hold-out week where some pumps develop faults.
type Fleet struct {
	History []Reading
	Holdout []Reading
}

type pump struct {
	capacity, efficiency, baseTemp, baseVib, suction float64
}

// Generate builds the scenario from cfg.Seed.
func Generate(cfg Config) *Fleet {
	if cfg.Pumps == 0 {
		cfg.Pumps = 24
	}
	if cfg.HistoryDays == 0 {
		cfg.HistoryDays = 21
	}
	if cfg.HoldoutDays == 0 {
		cfg.HoldoutDays = 7
	}
	rng := rand.New(rand.NewPCG(cfg.Seed, stream.Fleet))
	pumps := make([]pump, cfg.Pumps)
	for i := range pumps {
		pumps[i] = pump{
			capacity:   90 + 30*rng.Float64(),
			efficiency: 0.9 + 0.2*rng.Float64(),
			baseTemp:   38 + 6*rng.Float64(),
			baseVib:    1.2 + 0.6*rng.Float64(),
			suction:    140 + 30*rng.Float64(),
		}
	}
	// faults in the hold-out week: a third of the pumps, kinds rotating
	type plan struct {
		kind         string
		start, until int // hours into the hold-out week
	}
	plans := map[int]plan{}
	holdHours := 24 * cfg.HoldoutDays
	kinds := []string{BearingWear, Cavitation, StuckSensor}
	for i := 0; i < cfg.Pumps; i += 3 {
		k := kinds[(i/3)%3]
		start := 24 + rng.IntN(max(1, holdHours-72))
		until := holdHours
		if k == Cavitation {
			until = start + 6 + rng.IntN(10) // bursts of some hours
		}
		plans[rng.IntN(cfg.Pumps)] = plan{k, start, until}
	}
	f := &Fleet{}
	total := 24 * (cfg.HistoryDays + cfg.HoldoutDays)
	for p, pp := range pumps {
		stuck := 0.0
		for h := 0; h < total; h++ {
			// demand: daily cycle plus weather-like slow wander
			day := 2 * math.Pi * float64(h%24) / 24
			load := 0.55 + 0.3*math.Sin(day-1.8) + 0.08*math.Sin(2*math.Pi*float64(h)/(24*5)+float64(p)) + 0.04*rng.NormFloat64()
			load = math.Min(math.Max(load, 0.15), 1)
			flow := pp.capacity * load * (1 + 0.01*rng.NormFloat64())
			current := 6 + 0.18*flow/pp.efficiency + 0.2*rng.NormFloat64()
			discharge := 300 + 2.2*flow + 4*rng.NormFloat64()
			suction := pp.suction - 0.15*flow + 2*rng.NormFloat64()
			vib := pp.baseVib + 0.012*flow + 0.08*rng.NormFloat64()
			temp := pp.baseTemp + 0.09*current + 0.5*rng.NormFloat64()
			r := Reading{Pump: p, Hour: h}
			if hh := h - 24*cfg.HistoryDays; hh >= 0 {
				if pl, ok := plans[p]; ok && hh >= pl.start && hh < pl.until {
					r.Fault = pl.kind
					t := float64(hh - pl.start)
					switch pl.kind {
					case BearingWear:
						vib += 0.05 * t
						temp += 0.12 * t
					case Cavitation:
						suction -= 45 + 10*rng.Float64()
						vib += 1.5 + 1.5*rng.Float64()
						flow *= 0.85 + 0.1*rng.Float64()
					case StuckSensor:
						if stuck == 0 {
							stuck = flow
						}
						flow = stuck
					}
				}
			}
			r.X = [6]float64{vib, temp, flow, current, suction, discharge}
			if h < 24*cfg.HistoryDays {
				f.History = append(f.History, r)
			} else {
				f.Holdout = append(f.Holdout, r)
			}
		}
	}
	return f
}

// Dataset turns readings into rows of the six telemetry columns, with
// label 1 for faulty readings and 0 for healthy ones.
func Dataset(rs []Reading) *data.Dataset {
	x := make([]float32, 0, 6*len(rs))
	lab := make([]int, len(rs))
	for i, r := range rs {
		for _, v := range r.X {
			x = append(x, float32(v))
		}
		if r.Fault != Healthy {
			lab[i] = 1
		}
	}
	d := &data.Dataset{Rows: len(rs), Cols: 6, X: x, Labels: lab, Columns: Columns}
	return d
}
