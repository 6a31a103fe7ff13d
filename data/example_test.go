package data_test

import (
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"

	"github.com/quernlab/quern/data"
)

func ExampleReadCSV() {
	in := "pump,vibration,temperature,fault\nP1,0.12,61.5,0\nP2,0.31,70.2,1\nP3,0.09,59.8,\n"
	d, err := data.ReadCSV(strings.NewReader(in), "pumps.csv", data.CSVConfig{
		Columns: []string{"vibration", "temperature"},
		Label:   "fault",
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(d.Rows, "rows of", d.Columns, "labels", d.Labels)

	_, err = data.ReadCSV(strings.NewReader("a,b\n1,2\n3,oops\n"), "bad.csv", data.CSVConfig{})
	fmt.Println(err)
	// Output:
	// 3 rows of [vibration temperature] labels [0 1 -1]
	// data: bad.csv:3: column 2 (b): "oops" is not a finite number
}

func ExampleFit() {
	d, _ := data.New([]float32{1, 10, 2, 20, 3, 30}, 3, 2)
	s, _ := data.Fit(data.ScaleMinMax, d)
	z, _ := s.Apply(d)
	fmt.Println(z.X)
	// Output: [0 0 0.5 0.5 1 1]
}

func ExampleDataset_Split() {
	x := make([]float32, 10)
	d, _ := data.New(x, 10, 1)
	train, val, _ := d.Split(0.2, rand.New(rand.NewPCG(1, 1)))
	fmt.Println(train.Rows, val.Rows)
	// Output: 8 2
}

// A table read from its file on every pass: the first pass learns what
// training needs, later passes hand on runs of rows, never the table.
func ExampleOpenStream() {
	dir, _ := os.MkdirTemp("", "stream")
	defer os.RemoveAll(dir)
	path := filepath.Join(dir, "readings.csv")
	var b strings.Builder
	b.WriteString("flow,pressure\n")
	for i := range 1000 {
		fmt.Fprintf(&b, "%d,%d\n", i%10, 100+i%7)
	}
	os.WriteFile(path, []byte(b.String()), 0o644)

	s, err := data.OpenStream(path, data.StreamConfig{Validation: 0.2, SplitSeed: 1, CacheDir: dir})
	if err != nil {
		fmt.Println(err)
		return
	}
	defer s.Close()
	fmt.Println(s.Rows, "rows of", s.Columns, "held out about a fifth:", s.ValRows > 150 && s.ValRows < 250)
	sc, _ := data.Fit(data.ScaleMinMax, s.Bounds(data.TrainRows)) // on every training row
	fmt.Println("min-max offsets", sc.Offset)
	sum := 0
	s.Each(data.ValRows, func(x []float32, rows int) error { sum += rows; return nil })
	fmt.Println(sum == s.ValRows)
	// Output:
	// 1000 rows of [flow pressure] held out about a fifth: true
	// min-max offsets [0 100]
	// true
}
