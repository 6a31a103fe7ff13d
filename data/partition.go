package data

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"math"
	"os"
	"runtime"
	"slices"
	"strings"
)

// A Partition is a CSV table of numbers (plain or gzip) too large to
// hold, regrouped on disk by the text of a key column: the rows of each
// key together, keys in sorted order, rows in file order within a key,
// the rows of an empty key last, as Dataset.GroupBy orders a table in
// memory. Group reads one key's rows into memory, so a fleet of models
// trains from a file larger than memory as long as each group fits. It
// holds, besides, what a table read by type in memory would say of the
// same rows: their fingerprint and their encoding (PartitionCSV reads
// every cell as a number, so the encoding is a plain one).
type Partition struct {
	Path    string
	Columns []string
	Cols    int
	// Rows counts every row; Ungrouped those with an empty key.
	Rows, Ungrouped int
	// Groups are the keys with their rows, sorted by key.
	Groups []PartGroup
	// Fingerprint is Dataset.Fingerprint of the rows in file order.
	Fingerprint string
	// Encoding is the plain encoding a typed reading of the same rows
	// gives (each column's range, kind and fill).
	Encoding *Encoding

	file *os.File // the regrouped rows, 4 bytes a value
	name string   // its name while it has one
}

// PartGroup is one key's rows in a Partition.
type PartGroup struct {
	Key   string
	Rows  int
	first int // its first row's place in the regrouped rows
}

// maxPartitionKeys bounds the distinct keys a partition keeps counts of.
const maxPartitionKeys = 1 << 22

// partitionBuffer is the memory the regrouping's write buffers share.
const partitionBuffer = 16 << 20

// PartitionCSV reads the CSV file at path twice: once to count each
// key's rows (the key is the text of column key, trimmed; a text among
// missing names no key), once to write the rows, regrouped, into a file
// in dir that has no name on disk where the system allows (Close removes
// it in any case). cfg selects the feature columns as for ReadCSV (key
// is never one); every feature cell must be a number.
func PartitionCSV(path string, cfg CSVConfig, key string, missing []string, dir string) (*Partition, error) {
	if cfg.Label != "" || cfg.Encoding != nil {
		return nil, fmt.Errorf("%w: %s: a partitioned table is read for its numbers only (no labels or a model's encoding)", ErrStream, path)
	}
	cfg.Typed, cfg.Types, cfg.Missing = false, nil, nil
	if cfg.Limits.Bytes == 0 {
		cfg.Limits.Bytes = math.MaxInt64 // nothing is held
	}
	cfg.Keep = []string{key}
	if cfg.Columns == nil {
		cfg.Exclude = append(slices.Clone(cfg.Exclude), key)
	}
	none := map[string]bool{"": true}
	for _, m := range missing {
		none[m] = true
	}
	keyOf := func(s string) string {
		s = strings.TrimSpace(s)
		if none[s] {
			return ""
		}
		return s
	}
	p := &Partition{Path: path}
	counts := map[string]int{}
	err := EachCSV(path, cfg, func(columns []string, x []float32, kept []string, rows int) error {
		if p.Columns == nil {
			p.Columns, p.Cols = slices.Clone(columns), len(columns)
		}
		for r := range rows {
			k := keyOf(kept[r])
			if _, ok := counts[k]; !ok && len(counts) >= maxPartitionKeys {
				return &ParseError{File: path, Msg: fmt.Sprintf("more than %d distinct values of %s: not a column that names groups?", maxPartitionKeys, key)}
			}
			counts[k]++
		}
		p.Rows += rows
		return nil
	})
	if err != nil {
		return nil, err
	}
	if p.Rows == 0 {
		return nil, &ParseError{File: path, Msg: "no data rows"}
	}
	p.Ungrouped = counts[""]
	keys := make([]string, 0, len(counts))
	for k := range counts {
		if k != "" {
			keys = append(keys, k)
		}
	}
	slices.Sort(keys)
	rank := make(map[string]int, len(keys)+1)
	next := make([]int, len(keys)+1) // each rank's next row place
	at := 0
	for i, k := range keys {
		rank[k] = i
		p.Groups = append(p.Groups, PartGroup{Key: k, Rows: counts[k], first: at})
		next[i] = at
		at += counts[k]
	}
	rank[""] = len(keys)
	next[len(keys)] = at
	counts = nil

	fh, err := os.CreateTemp(dir, "quern-groups-*.rows")
	if err != nil {
		return nil, fmt.Errorf("data: a folder for the regrouped rows: %w", err)
	}
	p.file, p.name = fh, fh.Name()
	if runtime.GOOS != "windows" && os.Remove(fh.Name()) == nil {
		p.name = ""
	}
	ok := false
	defer func() {
		if !ok {
			p.Close()
		}
	}()
	// each key's rows wait in a small buffer of its own, written at the
	// key's place when it fills
	rowBytes := 4 * p.Cols
	per := max(1, partitionBuffer/(rowBytes*(len(keys)+1)))
	bufs := make([][]byte, len(keys)+1)
	flush := func(g int) error {
		if len(bufs[g]) == 0 {
			return nil
		}
		n := len(bufs[g]) / rowBytes
		if _, err := p.file.WriteAt(bufs[g], int64(next[g]-n)*int64(rowBytes)); err != nil {
			return fmt.Errorf("data: writing the regrouped rows in %s: %w", dir, err)
		}
		bufs[g] = bufs[g][:0]
		return nil
	}
	// what a typed reading in memory says of the rows: their
	// fingerprint, each column's range and the fill sample
	h := sha256.New()
	var b8 [8]byte
	binary.LittleEndian.PutUint64(b8[:], uint64(p.Rows))
	h.Write(b8[:])
	binary.LittleEndian.PutUint64(b8[:], uint64(p.Cols))
	h.Write(b8[:])
	st := newColumnStats(p.Cols)
	step := max(1, p.Rows/fillSample)
	var sample []float32
	var raw []byte
	read := 0
	err = EachCSV(path, cfg, func(_ []string, x []float32, kept []string, rows int) error {
		raw = raw[:0]
		for _, v := range x {
			raw = binary.LittleEndian.AppendUint32(raw, math.Float32bits(v))
		}
		h.Write(raw)
		for r := range rows {
			row := x[r*p.Cols : (r+1)*p.Cols]
			for j, v := range row {
				st.add(j, v)
			}
			if (read+r)%step == 0 {
				sample = append(sample, row...)
			}
			g, known := rank[keyOf(kept[r])]
			if !known {
				return &ParseError{File: path, Msg: "the file changed since it was first read (a key appeared)"}
			}
			if bufs[g] == nil {
				bufs[g] = make([]byte, 0, per*rowBytes)
			}
			bufs[g] = append(bufs[g], raw[r*rowBytes:(r+1)*rowBytes]...)
			next[g]++
			if len(bufs[g]) == cap(bufs[g]) {
				if err := flush(g); err != nil {
					return err
				}
			}
		}
		read += rows
		return nil
	})
	if err != nil {
		return nil, err
	}
	if read != p.Rows {
		return nil, &ParseError{File: path, Msg: fmt.Sprintf("the file changed since it was first read: %d rows, then %d", p.Rows, read)}
	}
	for g := range bufs {
		if err := flush(g); err != nil {
			return nil, err
		}
	}
	// every key's places filled, as counted: a check on the file
	for i, g := range p.Groups {
		if next[i] != g.first+g.Rows {
			return nil, &ParseError{File: path, Msg: "the file changed since it was first read (a key's rows differ)"}
		}
	}
	p.Fingerprint = hex.EncodeToString(h.Sum(nil))
	n := len(sample) / p.Cols
	p.Encoding = plainEncodingOf(p.Columns, st, func(j int, vals []float64) []float64 {
		for r := range n {
			vals = append(vals, float64(sample[r*p.Cols+j]))
		}
		return vals
	}, missing)
	ok = true
	return p, nil
}

// Group reads the rows of group i into memory, with the partition's
// columns and encoding.
func (p *Partition) Group(i int) (*Dataset, error) {
	g := p.Groups[i]
	return p.read(g.first, g.Rows)
}

// Sample reads the rows at the given places of the regrouped order
// (sorted, each below Rows): what Dataset.Subset of the grouped table
// gives.
func (p *Partition) Sample(places []int) (*Dataset, error) {
	d := &Dataset{Rows: len(places), Cols: p.Cols, X: make([]float32, 0, len(places)*p.Cols), Columns: p.Columns, Encoding: p.Encoding}
	rowBytes := 4 * p.Cols
	raw := make([]byte, rowBytes)
	for _, r := range places {
		if _, err := p.file.ReadAt(raw, int64(r)*int64(rowBytes)); err != nil {
			return nil, fmt.Errorf("data: reading the regrouped rows: %w", err)
		}
		for j := range p.Cols {
			d.X = append(d.X, math.Float32frombits(binary.LittleEndian.Uint32(raw[4*j:])))
		}
	}
	return d, nil
}

func (p *Partition) read(first, rows int) (*Dataset, error) {
	rowBytes := 4 * p.Cols
	raw := make([]byte, rows*rowBytes)
	if _, err := p.file.ReadAt(raw, int64(first)*int64(rowBytes)); err != nil {
		return nil, fmt.Errorf("data: reading the regrouped rows: %w", err)
	}
	d := &Dataset{Rows: rows, Cols: p.Cols, X: make([]float32, rows*p.Cols), Columns: p.Columns, Encoding: p.Encoding}
	for i := range d.X {
		d.X[i] = math.Float32frombits(binary.LittleEndian.Uint32(raw[4*i:]))
	}
	return d, nil
}

// Close removes the regrouped rows.
func (p *Partition) Close() error {
	if p.file == nil {
		return nil
	}
	err := p.file.Close()
	if p.name != "" {
		os.Remove(p.name)
	}
	p.file = nil
	return err
}
