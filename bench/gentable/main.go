// Command gentable writes the whole-job benchmark's table: an invented
// cold store whose 32 sensors (air and shelf temperatures, humidity,
// compressor currents and pressures, door contacts) are driven by four
// hidden causes (the weather, deliveries, the compressor's duty cycle, the
// hour), one reading a row, as CSV with a header.
//
//	go run ./bench/gentable -rows 1000000 -out table.csv
//
// With -stores N it writes a chain of N stores instead: a first column
// "store" (store0001, ...), the readings of the stores interleaved in
// time (row r is store r mod N's), and each store its own sensors'
// offsets, noise and mix of the causes, so that what is normal differs
// from store to store: the fleet benchmark's table.
//
//	go run ./bench/gentable -stores 1000 -sensors 34 -rows 1000000 -out fleet.csv
package main

import (
	"bufio"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
)

func main() {
	rows := flag.Int("rows", 1_000_000, "rows to write")
	out := flag.String("out", "table.csv", "CSV file to write")
	seed := flag.Uint64("seed", 1, "random seed")
	stores := flag.Int("stores", 0, "stores in the chain (0: one table with no store column)")
	sensors := flag.Int("sensors", 32, "sensor columns")
	flag.Parse()
	if *sensors < 1 || *sensors > 1000 || *stores < 0 || *rows < 0 {
		fmt.Fprintln(os.Stderr, "gentable: want 1 to 1000 -sensors, and -stores and -rows not negative")
		os.Exit(2)
	}
	if err := write(*out, *rows, *seed, *stores, *sensors); err != nil {
		fmt.Fprintln(os.Stderr, "gentable:", err)
		os.Exit(1)
	}
}

func write(path string, rows int, seed uint64, stores, cols int) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	w := bufio.NewWriterSize(f, 1<<20)
	rng := rand.New(rand.NewPCG(seed, 0x7ab1e))
	// each sensor mixes the four causes with its own weights, offset and
	// noise level
	weight := make([][4]float64, cols)
	offset, noise := make([]float64, cols), make([]float64, cols)
	for j := 0; j < cols; j++ {
		for k := range weight[j] {
			weight[j][k] = rng.NormFloat64()
		}
		offset[j] = 10 * rng.Float64()
		noise[j] = 0.05 + 0.2*rng.Float64()
	}
	// each store shifts the offsets, scales the noise and bends the mix
	type store struct {
		shift, scale []float64
		bend         [][4]float64
	}
	chain := make([]store, stores)
	for i := range chain {
		s := store{make([]float64, cols), make([]float64, cols), make([][4]float64, cols)}
		for j := 0; j < cols; j++ {
			s.shift[j] = 3 * rng.NormFloat64()
			s.scale[j] = 0.5 + rng.Float64()
			for k := range s.bend[j] {
				s.bend[j][k] = 0.3 * rng.NormFloat64()
			}
		}
		chain[i] = s
	}
	if stores > 0 {
		w.WriteString("store,")
	}
	for j := 0; j < cols; j++ {
		if j > 0 {
			w.WriteByte(',')
		}
		fmt.Fprintf(w, "sensor%02d", j+1)
	}
	w.WriteByte('\n')
	buf := make([]byte, 0, 32)
	for r := 0; r < rows; r++ {
		var st *store
		if stores > 0 {
			st = &chain[r%stores]
			fmt.Fprintf(w, "store%04d,", r%stores+1)
		}
		hour := float64(r%24) / 24
		causes := [4]float64{
			math.Sin(2 * math.Pi * float64(r) / (24 * 365)),          // weather
			rng.ExpFloat64() - 1,                                     // deliveries
			math.Sin(2*math.Pi*float64(r)/7) + 0.3*rng.NormFloat64(), // duty cycle
			math.Cos(2 * math.Pi * hour),                             // hour
		}
		for j := 0; j < cols; j++ {
			v := offset[j] + noise[j]*rng.NormFloat64()
			for k, c := range causes {
				v += weight[j][k] * c
			}
			if st != nil {
				v = offset[j] + st.shift[j] + st.scale[j]*noise[j]*rng.NormFloat64()
				for k, c := range causes {
					v += (weight[j][k] + st.bend[j][k]) * c
				}
			}
			if j > 0 {
				w.WriteByte(',')
			}
			buf = strconv.AppendFloat(buf[:0], v, 'f', 4, 64)
			w.Write(buf)
		}
		w.WriteByte('\n')
	}
	if err := w.Flush(); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}
