package report_test

import (
	"fmt"
	"os"
	"path/filepath"

	"github.com/quernlab/quern/report"
	"github.com/quernlab/quern/train"
)

func Example() {
	dir, _ := os.MkdirTemp("", "report")
	defer os.RemoveAll(dir)
	h := &train.History{BestEpoch: 3, BestLoss: 0.2}
	for e, v := range []float64{0.9, 0.4, 0.2, 0.25} {
		h.Epochs = append(h.Epochs, train.EpochRecord{Train: []train.Metric{{Name: "loss", Value: v + 0.05*float64(e)}}, Validation: []train.Metric{{Name: "loss", Value: v}}})
	}
	if err := report.LossCurves(filepath.Join(dir, "loss.png"), h, report.CurveOptions{}); err != nil {
		fmt.Println(err)
		return
	}
	pg := report.Page{Title: "Example run", Figures: []report.Figure{{File: "loss.png", Caption: "Loss per epoch"}}}
	if err := pg.Write(dir); err != nil {
		fmt.Println(err)
		return
	}
	for _, f := range []string{"loss.png", "index.html"} {
		_, err := os.Stat(filepath.Join(dir, f))
		fmt.Println(f, err == nil)
	}
	// Output:
	// loss.png true
	// index.html true
}
