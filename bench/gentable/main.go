// Command gentable writes the whole-job benchmark's table: an invented
// cold store whose 32 sensors (air and shelf temperatures, humidity,
// compressor currents and pressures, door contacts) are driven by four
// hidden causes (the weather, deliveries, the compressor's duty cycle, the
// hour), one reading a row, as CSV with a header.
//
//	go run ./bench/gentable -rows 1000000 -out table.csv
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
	flag.Parse()
	if err := write(*out, *rows, *seed); err != nil {
		fmt.Fprintln(os.Stderr, "gentable:", err)
		os.Exit(1)
	}
}

const cols = 32

func write(path string, rows int, seed uint64) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	w := bufio.NewWriterSize(f, 1<<20)
	rng := rand.New(rand.NewPCG(seed, 0x7ab1e))
	// each sensor mixes the four causes with its own weights, offset and
	// noise level
	var weight [cols][4]float64
	var offset, noise [cols]float64
	for j := 0; j < cols; j++ {
		for k := range weight[j] {
			weight[j][k] = rng.NormFloat64()
		}
		offset[j] = 10 * rng.Float64()
		noise[j] = 0.05 + 0.2*rng.Float64()
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
