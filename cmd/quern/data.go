package main

import (
	"flag"
	"fmt"
	"os"
	"strconv"
	"strings"

	"github.com/quernlab/quern/data"
)

// dataFlags are the input options shared by the commands that read data.
type dataFlags struct {
	path     string
	labels   string // idx label file
	label    string // CSV label column
	columns  string
	noHeader bool
	skip     int
	grey     bool
}

func (d *dataFlags) register(fs *flag.FlagSet, required bool) {
	what := "input data: a CSV file (plain or gzip), an idx file (raw or gzip) or a folder of PNG images, told apart by content"
	if required {
		what += " (required)"
	}
	fs.StringVar(&d.path, "data", "", what)
	fs.StringVar(&d.labels, "labels", "", "idx file of labels for idx data")
	fs.StringVar(&d.label, "label", "", "CSV column holding integer class labels (empty cells: unlabelled)")
	fs.StringVar(&d.columns, "columns", "", "comma-separated CSV feature columns (default: all but the label)")
	fs.BoolVar(&d.noHeader, "no-header", false, "the CSV file has no header line (columns are then named c0, c1, ...)")
	fs.IntVar(&d.skip, "skip", 0, "CSV lines to skip before the header")
	fs.BoolVar(&d.grey, "grey", false, "read PNG images as one grey channel")
}

// dataSpec is how the data were read, as recorded in model files.
type dataSpec struct {
	Path     string `json:"path"`
	Labels   string `json:"labels,omitempty"`
	Label    string `json:"label,omitempty"`
	Columns  string `json:"columns,omitempty"`
	NoHeader bool   `json:"no_header,omitempty"`
	Skip     int    `json:"skip,omitempty"`
	Grey     bool   `json:"grey,omitempty"`
}

func (d *dataFlags) spec() dataSpec {
	return dataSpec{Path: d.path, Labels: d.labels, Label: d.label, Columns: d.columns, NoHeader: d.noHeader, Skip: d.skip, Grey: d.grey}
}

func (s dataSpec) flags() dataFlags {
	return dataFlags{path: s.Path, labels: s.Labels, label: s.Label, columns: s.Columns, noHeader: s.NoHeader, skip: s.Skip, grey: s.Grey}
}

func splitList(s string) []string {
	if strings.TrimSpace(s) == "" {
		return nil
	}
	parts := strings.Split(s, ",")
	for i := range parts {
		parts[i] = strings.TrimSpace(parts[i])
	}
	return parts
}

func (d *dataFlags) load() (*data.Dataset, data.Format, error) {
	if d.path == "" {
		return nil, "", usagef("-data is required")
	}
	if _, err := os.Stat(d.path); err != nil {
		return nil, "", fmt.Errorf("cannot read data: %w", err)
	}
	cfg := data.LoadConfig{
		CSV:    data.CSVConfig{NoHeader: d.noHeader, SkipLines: d.skip, Columns: splitList(d.columns), Label: d.label},
		IDX:    data.IDXConfig{Labels: d.labels},
		Images: data.ImageConfig{Grey: d.grey},
	}
	return data.Load(d.path, cfg)
}

// loadFor loads data for a trained model whose columns are known: a CSV
// file with a header is read by those column names when no columns are
// given, so extra columns (an id, a timestamp) are ignored.
func (d *dataFlags) loadFor(columns []string, cols int) (*data.Dataset, error) {
	if d.columns == "" && !d.noHeader && len(columns) == cols && columns[0] != "" && columns[0] != "c0" {
		if f, err := data.Detect(d.path); err == nil && f == data.FormatCSV {
			saved := d.columns
			d.columns = strings.Join(columns, ",")
			ds, _, err := d.load()
			d.columns = saved
			if err == nil {
				return ds, nil
			}
		}
	}
	ds, _, err := d.load()
	if err != nil {
		return nil, err
	}
	if ds.Cols != cols {
		return nil, fmt.Errorf("%s has %d feature columns, the model takes %d", d.path, ds.Cols, cols)
	}
	return ds, nil
}

func parseInts(s, name string) ([]int, error) {
	if strings.TrimSpace(s) == "" {
		return []int{}, nil
	}
	var out []int
	for _, p := range splitList(s) {
		v, err := strconv.Atoi(p)
		if err != nil || v <= 0 {
			return nil, usagef("-%s: %q is not a positive width", name, p)
		}
		out = append(out, v)
	}
	return out, nil
}
