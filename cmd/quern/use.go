package main

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"github.com/quernlab/quern/layers"
	"io"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"sort"
	"strconv"
	"strings"
	"sync"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/internal/modelio"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/report"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
)

// loaded is a model read from a file, whichever its kind.
type loaded struct {
	path  string
	file  *modelfile.File
	model model.Model
}

func loadModel(path string) (*loaded, error) {
	if path == "" {
		return nil, usagef("-model is required")
	}
	f, err := modelfile.Read(path, 0)
	if err != nil {
		return nil, err
	}
	m, err := model.FromFile(f)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return &loaded{path: path, file: f, model: m}, nil
}

// trainedOn reports whether ds holds the rows the model was trained on,
// by the data fingerprint in its provenance.
func (l *loaded) trainedOn(ds *data.Dataset) bool {
	p, err := modelfile.ProvenanceOf(l.file)
	return err == nil && p != nil && p.DataFingerprint != "" && p.DataFingerprint == ds.Fingerprint()
}

// isCheckpoint reports whether the file holds a run's training state.
func (l *loaded) isCheckpoint() bool {
	var raw json.RawMessage
	for _, key := range []string{"checkpoint", "resume"} {
		if ok, _ := l.file.Section(key, &raw); ok {
			return true
		}
	}
	return false
}

// cannot is the error for a model without a capability a command needs.
func (l *loaded) cannot(command, needs string) error {
	return fmt.Errorf("%s needs %s; %s holds a model of kind %q", command, needs, l.path, l.model.Kind())
}

// openAs loads the model file of a command that reads from or writes to
// other files (paths: flag name to path, -model among them) and asks the
// model for the capability C the command needs.
func openAs[C any](command, needs string, paths map[string]string) (*loaded, C, error) {
	var c C
	if err := distinctPaths(paths); err != nil {
		return nil, c, err
	}
	if out := paths["-out"]; out != "" && out != "-" {
		if err := writable(out, "-out"); err != nil {
			return nil, c, err
		}
	}
	l, err := loadModel(paths["-model"])
	if err != nil {
		return nil, c, err
	}
	c, ok := l.model.(C)
	if !ok {
		return nil, c, l.cannot(command, needs)
	}
	return l, c, nil
}

// streamable checks that the model's rows can be streamed from the data
// flags' file (a CSV table of numbers the model reads by name or place)
// and returns the model's features and the columns kept.
func (l *loaded) streamable(d *dataFlags) (features int, kept []string, err error) {
	if d.path == "" || d.path == "-" {
		return 0, nil, usagef("-stream reads a file: give -data FILE")
	}
	if f, err := data.Detect(d.path); err != nil {
		return 0, nil, fmt.Errorf("cannot read data: %w", err)
	} else if f != data.FormatCSV && f != data.FormatParquet {
		return 0, nil, usagef("-stream reads CSV files (plain or gzip) and Parquet files; %s is %s", d.path, f)
	} else if f == data.FormatParquet && d.keep != "" {
		return 0, nil, usagef("-keep with a Parquet file: kept columns are copied from CSV files")
	}
	if d.label != "" {
		return 0, nil, usagef("-label with -stream: a streamed table is read for its numbers")
	}
	if enc := l.model.Schema().Encoding; enc != nil && !enc.Plain() {
		return 0, nil, usagef("-stream: %s reads a table with categories or missing cells (%s), which needs the table in memory; score without -stream", l.path, enc.Describe())
	}
	return l.model.Width(), splitList(d.keep), nil
}

// streamScores reads the data flags' CSV file a run of rows at a time,
// by the model's column names where the file has a header, and hands
// each run to write (which scores it), in file order.
func (l *loaded) streamScores(d *dataFlags, st *status, write func(x []float32, kept []string, rows int) error) error {
	comma, err := d.separator()
	if err != nil {
		return err
	}
	cfg := data.CSVConfig{NoHeader: d.noHeader, SkipLines: d.skip, Columns: splitList(d.columns), Keep: splitList(d.keep), Comma: comma, Limits: d.limits.l}
	names := l.model.Schema().Columns
	byName := cfg.Columns == nil && !d.noHeader && len(names) == l.model.Width() && names[0] != "" && names[0] != "c0"
	if byName {
		cfg.Columns = names
	}
	done := 0
	st.begin("score", func() string { return fmt.Sprintf("%d rows, streamed", done) })
	defer st.end()
	err = data.EachRows(d.path, cfg, func(cols []string, x []float32, kept []string, rows int) error {
		if len(cols) != l.model.Width() {
			return fmt.Errorf("%s has %d feature columns, the model takes %d", d.path, len(cols), l.model.Width())
		}
		done += rows
		return write(x, kept, rows)
	})
	var pe *data.ParseError
	if byName && errors.As(err, &pe) && strings.HasPrefix(pe.Msg, "no column ") {
		return fmt.Errorf("%s: the model's column %s is not in the header (the model reads %s by name, in any order); give -columns with the file's names for them in that order, or -no-header to read by position",
			d.path, strings.TrimPrefix(pe.Msg, "no column "), strings.Join(names, ", "))
	}
	var le *data.LimitError
	if errors.As(err, &le) {
		return fmt.Errorf("%w (raise it with -limit %s=N)", err, le.Key)
	}
	return err
}

// loadRows loads the data flags' rows for the model: by its column names
// where the file has a header.
func (l *loaded) loadRows(d *dataFlags, st *status) (*data.Dataset, error) {
	return d.loadFor(l.model.Schema(), l.model.Width(), st)
}

// outputWhole is output for a file written as rows are read: it is
// written beside path and takes path's place only when done returns
// nil; abort (deferred) removes it otherwise. Standard output cannot be
// taken back: what was written stays.
func outputWhole(e *env, path string) (w io.Writer, done func() error, abort func(), err error) {
	if isStdout(path) {
		return e.stdout, func() error { return nil }, func() {}, nil
	}
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return nil, nil, func() {}, err
	}
	bw := bufio.NewWriter(f)
	finished := false
	done = func() error {
		if err := bw.Flush(); err != nil {
			return err
		}
		if err := f.Close(); err != nil {
			return err
		}
		if err := os.Chmod(f.Name(), 0o644); err != nil {
			return err
		}
		if err := os.Rename(f.Name(), path); err != nil {
			return err
		}
		finished = true
		return nil
	}
	abort = func() {
		if !finished {
			f.Close()
			os.Remove(f.Name())
		}
	}
	return bw, done, abort, nil
}

// output opens path for writing ("-" or empty: standard output).
func output(e *env, path string) (io.Writer, func() error, error) {
	if isStdout(path) {
		return e.stdout, func() error { return nil }, nil
	}
	f, err := os.Create(path)
	if err != nil {
		return nil, nil, err
	}
	bw := bufio.NewWriter(f)
	return bw, func() error {
		if err := bw.Flush(); err != nil {
			f.Close()
			return err
		}
		return f.Close()
	}, nil
}

func f32s(v float32) string { return strconv.FormatFloat(float64(v), 'g', -1, 32) }

func writeRows(w io.Writer, header []string, x []float32, rows int) error {
	cw := csv.NewWriter(w)
	cw.Write(header)
	cw.Flush()
	if err := cw.Error(); err != nil {
		return err
	}
	return writeNumbers(w, x, rows, len(header))
}

// writeNumbers writes rows of cols float32 values as CSV lines, each in
// its shortest exact form (numbers need no quoting, so no field goes
// through the CSV writer).
func writeNumbers(w io.Writer, x []float32, rows, cols int) error {
	line := make([]byte, 0, 16*cols)
	for r := 0; r < rows; r++ {
		line = line[:0]
		for j, v := range x[r*cols : (r+1)*cols] {
			if j > 0 {
				line = append(line, ',')
			}
			line = strconv.AppendFloat(line, float64(v), 'g', -1, 32)
		}
		line = append(line, '\n')
		if _, err := w.Write(line); err != nil {
			return err
		}
	}
	return nil
}

func names(prefix string, n int) []string {
	s := make([]string, n)
	for i := range s {
		s[i] = prefix + strconv.Itoa(i)
	}
	return s
}

// chunkRows is how many rows score and encode handle at a time: memory
// for intermediate results stays bounded whatever the file's length.
const chunkRows = 4096

// inChunks runs compute on consecutive row ranges of at most chunkRows
// rows, several at once (one goroutine per core), and hands the results
// to write in row order, as the phase name of st, showing how many rows
// are done. At most two chunks per core are in flight.
func inChunks[T any](st *status, name string, rows int, compute func(lo, hi int) (T, error), write func(lo, hi int, r T) error) error {
	var mu sync.Mutex
	done := 0
	st.begin(name, func() string {
		mu.Lock()
		defer mu.Unlock()
		return fmt.Sprintf("%d/%d rows  %d%%", done, rows, 100*done/max(rows, 1))
	})
	defer st.end()
	type result struct {
		v   T
		err error
	}
	workers := max(1, runtime.GOMAXPROCS(0))
	pending := make(chan chan result, 2*workers)
	stop := make(chan struct{})
	var running sync.WaitGroup
	defer running.Wait() // no chunk outlives the call, even on an error
	defer close(stop)
	running.Add(1)
	go func() {
		defer running.Done()
		defer close(pending)
		sem := make(chan struct{}, workers)
		for lo := 0; lo < rows; lo += chunkRows {
			hi := min(rows, lo+chunkRows)
			ch := make(chan result, 1)
			select {
			case pending <- ch:
			case <-stop:
				return
			}
			select {
			case sem <- struct{}{}:
			case <-stop:
				return
			}
			running.Add(1)
			go func(lo, hi int) {
				defer running.Done()
				defer func() { <-sem }()
				v, err := compute(lo, hi)
				ch <- result{v, err}
			}(lo, hi)
		}
	}()
	lo := 0
	for ch := range pending {
		r := <-ch
		if r.err != nil {
			return r.err
		}
		hi := min(rows, lo+chunkRows)
		if err := write(lo, hi, r.v); err != nil {
			return err
		}
		lo = hi
		mu.Lock()
		done = hi
		mu.Unlock()
	}
	return nil
}

func cmdScore(e *env, args []string) error {
	fs := newFlags(e, "score", "-model MODEL -data FILE.csv [-out SCORES.csv]")
	modelPath := fs.String("model", "", "model file with anomaly scores and a threshold: an autoencoder (its distance score, or the reconstruction error) or a VAE (negative ELBO) (required)")
	var d dataFlags
	d.registerForModel(fs)
	out := fs.String("out", "-", "CSV file for the scores (- for standard output)")
	top := fs.Int("top", 3, "features to list per row, most contributing first, each with its share (its fraction of the parts of the score the row's columns add; negative parts count as none), the value the model expected (its reconstruction, kept within the training range, or a category's level) and the direction (above, below, other, missing)")
	fs.StringVar(&d.keep, "keep", "", "comma-separated CSV columns to copy, as they are, into the score file beside each row (an identifier, a timestamp); one named like a column of the score file (row, score, status, ...) is written as NAME (kept)")
	quiet := fs.Bool("quiet", false, "no progress output (the summary and the caution are still printed)")
	fleetDir := fs.String("fleet", "", "a fleet's `FOLDER` (quern train -group) to score with instead of one -model: each row by its group's model (the fleet's group column), or the shared model; a \"model\" column says which")
	streamed := fs.Bool("stream", false, "read the CSV or Parquet file a few MiB at a time, writing each run of scores before reading on, instead of holding the file: for tables of numbers larger than memory (not with -heatmaps; -out is written beside and takes its name only when every row is scored)")
	heat := fs.String("heatmaps", "", "images: folder (made if need be) for a PNG of each flagged image, row-N.png, with the map of its pixels' parts in the score to its right (beyond what each would cost if given back exactly), white for none to dark red for the image's largest")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	if *top < 0 {
		return usagef("-top %d: want 0 or more", *top)
	}
	if *streamed && *heat != "" {
		return usagef("-heatmaps with -stream: heat maps draw images, and -stream reads CSV tables")
	}
	if *heat != "" && sameFile(*heat, d.path) {
		return usagef("-heatmaps %s is the -data folder: no command writes among its own input", *heat)
	}
	st := newStatus(e.stderr, *quiet)
	defer st.end() // an error return leaves no phase drawn or ticking
	st.begin("open", nil)
	var l *loaded
	var sc model.Scorer
	var fl *scoringFleet
	var err error
	if *fleetDir != "" {
		if *modelPath != "" {
			return usagef("give -model MODEL or -fleet FOLDER, not both")
		}
		if l, fl, err = openFleetForScoring(*fleetDir, &d, *out); err != nil {
			return err
		}
		sc = l.model.(model.Scorer)
	} else {
		l, sc, err = openAs[model.Scorer]("score", "a model with anomaly scores (an autoencoder or a VAE)",
			map[string]string{"-data": d.path, "-out": *out, "-model": *modelPath})
		if err != nil {
			return err
		}
	}
	st.end()
	th := sc.Calibrated()
	if th == nil && fl == nil {
		if l.isCheckpoint() {
			return fmt.Errorf("%s is a checkpoint, written before the threshold is set at the end of training; score with the model file", *modelPath)
		}
		return fmt.Errorf("%s has no threshold (train it with -val > 0)", *modelPath)
	}
	// the rows: held (ds), or streamed from the file, a run at a time
	var ds *data.Dataset
	var keptColumns []string
	var features int
	if *streamed {
		var err error
		if features, keptColumns, err = l.streamable(&d); err != nil {
			return err
		}
	} else {
		var err error
		if ds, err = l.loadRows(&d, st); err != nil {
			return err
		}
		keptColumns = ds.KeptColumns
		features = ds.Cols
		if enc := ds.Encoding; enc != nil && !enc.Plain() {
			features = len(enc.Fields) // contributions by the file's columns
		}
	}
	var explainer model.Explainer
	if *heat != "" {
		img := ds.Image
		if len(img) != 3 {
			return usagef("-heatmaps draws images, and %s holds a table", d.path)
		}
		var ok bool
		if explainer, ok = sc.(model.Explainer); !ok {
			return l.cannot("score -heatmaps", "a model that explains its scores pixel by pixel")
		}
		if err := os.MkdirAll(*heat, 0o755); err != nil {
			return fmt.Errorf("-heatmaps: %w", err)
		}
	}
	heatWritten := 0
	if ds != nil && l.trainedOn(ds) {
		st.warn("warning: %s holds the rows the model was trained on: their scores are in-sample, lower than new rows' would be, so fewer rows are flagged than the expected false-alarm rate; score rows the model has not seen to check the threshold", d.path)
	}
	if *top > features {
		*top = features // the file stays rectangular: one pair per feature at most
	}
	var w io.Writer
	var closeOut func() error
	if *streamed {
		// the scores are written as the rows are read: a file cut short
		// by a bad row further on must not stand for a complete one
		var abort func()
		w, closeOut, abort, err = outputWhole(e, *out)
		defer abort()
	} else {
		w, closeOut, err = output(e, *out)
	}
	if err != nil {
		return err
	}
	cw := csv.NewWriter(w)
	own := []string{"row", "score", "threshold", "anomaly", "status"}
	for k := 1; k <= *top; k++ {
		own = append(own, fmt.Sprintf("feature%d", k), fmt.Sprintf("share%d", k), fmt.Sprintf("expected%d", k), fmt.Sprintf("direction%d", k))
	}
	if fl != nil {
		keptColumns = append(slices.Clone(keptColumns), "model")
	}
	kept := make([]string, len(keptColumns))
	for i, k := range keptColumns {
		kept[i] = k
		if slices.Contains(own, k) {
			kept[i] = k + " (kept)" // a column of the file named like one of the score file's
		}
	}
	header := append(append([]string{"row"}, kept...), "score", "threshold", "anomaly")
	nk := len(keptColumns)
	if fl != nil {
		nk-- // the file's kept columns; "model" is the fleet's
	}
	header = append(header, own[5:]...)
	cw.Write(append(header, "status"))
	flagged, unscorable, noted, unseenRows := 0, 0, 0, 0
	// cells that are not numbers, per column: a column mostly unread is
	// said out loud, not only row by row
	unread := map[string]int{}
	unreadText := map[string]string{}
	var notes []data.RowNote // in row order
	if ds != nil {
		notes = ds.Notes
	}
	rec := make([]string, 0, len(header)+1)
	// writeScores writes the scores of the rows from lo on, keptAt(i)
	// being the kept texts of the i-th of them
	writeScores := func(lo int, scores []anomaly.Score, keptAt func(i int) []string) error {
		for i, s := range scores {
			var note *data.RowNote
			for len(notes) > 0 && notes[0].Row <= lo+i {
				if notes[0].Row == lo+i {
					note = &notes[0]
				}
				notes = notes[1:]
			}
			if note != nil && note.Unscorable && s.Unscorable == "" {
				// never reported as normal: flagged, with no score
				s = anomaly.Score{Value: math.NaN(), Threshold: s.Threshold, Anomaly: true, Unscorable: note.Text}
				note = nil
			}
			rec = append(rec[:0], strconv.Itoa(lo+i+1))
			rec = append(rec, keptAt(i)...)
			value := strconv.FormatFloat(s.Value, 'g', 8, 64)
			if s.Unscorable != "" {
				value = ""
			}
			if note != nil {
				modelio.MarkMissing(&s, note.Text)
				if name := data.NoteUnseen(note.Text); name != "" && s.Unseen == "" {
					s.Unseen, s.Anomaly = name, true
				}
			}
			rec = append(rec, value, strconv.FormatFloat(s.Threshold, 'g', 8, 64), strconv.FormatBool(s.Anomaly))
			for k := 0; k < *top; k++ {
				if k >= len(s.Top) {
					rec = append(rec, "", "", "", "")
					continue
				}
				f := s.Top[k]
				name := f.Name
				if name == "" {
					name = "c" + strconv.Itoa(f.Column)
				}
				rec = append(rec, name, strconv.FormatFloat(f.Share, 'f', 4, 64), f.Expected, f.Direction)
			}
			status := "ok"
			if s.Unscorable != "" {
				status = "unscorable: " + s.Unscorable
				unscorable++
			} else if s.Anomaly && !(s.Unseen != "" && s.Value <= s.Threshold) {
				flagged++
			}
			if s.Unseen != "" {
				unseenRows++
			}
			if note != nil {
				status += "; read: " + note.Text
				noted++
				_, nn, texts := data.NoteColumns(note.Text)
				for j, name := range nn {
					if unread[name]++; unreadText[name] == "" {
						unreadText[name] = texts[j]
					}
				}
			}
			cw.Write(append(rec, status))
		}
		cw.Flush()
		return cw.Error()
	}
	total := 0
	// score scores n rows x, whose kept texts are kept (n*nk of them):
	// with the model, or each with its group's model (routes says which)
	score := func(x []float32, n int, kept []string) (fleetScores, error) {
		if fl != nil {
			return fl.score(x, n, *top, kept, nk)
		}
		v, err := sc.Score(x, n, *top)
		return fleetScores{scores: v}, err
	}
	keptOf := func(kept []string, r fleetScores, i int) []string {
		k := kept[i*nk : (i+1)*nk]
		if fl != nil {
			k = append(slices.Clone(k), r.routes[i])
		}
		return k
	}
	if ds != nil {
		total = ds.Rows
		err = inChunks(st, "score", ds.Rows, func(lo, hi int) (fleetScores, error) {
			return score(ds.X[lo*ds.Cols:hi*ds.Cols], hi-lo, ds.Kept[lo*nk:hi*nk])
		}, func(lo, hi int, r fleetScores) error {
			if err := writeScores(lo, r.scores, func(i int) []string { return keptOf(ds.Kept[lo*nk:hi*nk], r, i) }); err != nil {
				return err
			}
			fl.count(r)
			if explainer != nil {
				n, err := writeHeatMaps(*heat, explainer, ds, lo, r.scores)
				heatWritten += n
				return err
			}
			return nil
		})
	} else {
		err = l.streamScores(&d, st, func(x []float32, kept []string, rows int) error {
			r, err := score(x, rows, kept)
			if err != nil {
				return err
			}
			lo := total
			total += rows
			fl.count(r)
			return writeScores(lo, r.scores, func(i int) []string { return keptOf(kept, r, i) })
		})
	}
	if err != nil {
		return err
	}
	st.begin("write", nil)
	if err := closeOut(); err != nil {
		return err
	}
	st.end()
	var line string
	if fl != nil {
		line = fmt.Sprintf("scored %d rows with the fleet %s by %s: %d above their models' thresholds (%d rows by their group's own model, %d by the shared model", total, *fleetDir, fl.col, flagged, fl.own, fl.shared)
		if fl.none > 0 {
			line += fmt.Sprintf(", %d with no model: flagged, unscored", fl.none)
		}
		line += ")"
	} else {
		line = fmt.Sprintf("scored %d rows: %d above the threshold %.6g (expected false-alarm rate %.2f%%%s)", total, flagged, th.Value, 100*th.ExpectedFalseAlarm, boundPhrase(*th))
	}
	if unscorable > 0 {
		line += fmt.Sprintf("; %s, flagged (see the status column)", plural(unscorable, "unscorable row"))
	}
	if noted > 0 {
		line += fmt.Sprintf("; %s with cells filled in or levels not seen in training (the status column says which)", plural(noted, "row"))
	}
	if unseenRows > 0 {
		line += fmt.Sprintf("; %s with a category level never seen in training, flagged whatever the score", plural(unseenRows, "row"))
	}
	fmt.Fprintln(e.stderr, line)
	if explainer != nil {
		fmt.Fprintf(e.stderr, "wrote %s in %s: each flagged image with its pixels' parts in the score (white none, dark red the image's largest)\n", plural(heatWritten, "heat map"), *heat)
	}
	cols := make([]string, 0, len(unread))
	for name := range unread {
		cols = append(cols, name)
	}
	slices.Sort(cols)
	for _, name := range cols {
		if n := unread[name]; 2*n > total {
			fmt.Fprintf(e.stderr, "warning: column %q: %d of %d cells are not numbers (such as %s), read as missing: these rows' scores say little of that column (quern reads numbers with a decimal point; a decimal comma is not read)\n", name, n, total, unreadText[name])
		}
	}
	fmt.Fprintln(e.stderr, anomaly.Caution)
	st.done()
	return nil
}

func cmdEncode(e *env, args []string) error {
	fs := newFlags(e, "encode", "-model MODEL -data FILE [-out CODES.csv]")
	modelPath := fs.String("model", "", "model file with codes: an autoencoder or a VAE (required)")
	var d dataFlags
	d.registerForModel(fs)
	out := fs.String("out", "-", "CSV file for the codes (- for standard output)")
	quiet := fs.Bool("quiet", false, "no progress output")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	st := newStatus(e.stderr, *quiet)
	defer st.end() // an error return leaves no phase drawn or ticking
	st.begin("open", nil)
	l, enc, err := openAs[model.Encoder]("encode", "a model with codes (an autoencoder or a VAE)",
		map[string]string{"-data": d.path, "-out": *out, "-model": *modelPath})
	if err != nil {
		return err
	}
	st.end()
	ds, err := l.loadRows(&d, st)
	if err != nil {
		return err
	}
	w, closeOut, err := output(e, *out)
	if err != nil {
		return err
	}
	width := enc.CodeWidth()
	if err := writeRows(w, names("z", width), nil, 0); err != nil {
		return err
	}
	err = inChunks(st, "encode", ds.Rows, func(lo, hi int) ([]float32, error) {
		return enc.Encode(ds.X[lo*ds.Cols:hi*ds.Cols], hi-lo)
	}, func(lo, hi int, codes []float32) error {
		return writeNumbers(w, codes, hi-lo, width)
	})
	if err != nil {
		return err
	}
	st.begin("write", nil)
	if err := closeOut(); err != nil {
		return err
	}
	if !isStdout(*out) {
		st.say("wrote %s: codes of %d rows, %d values each", *out, ds.Rows, width)
	}
	st.done()
	return nil
}

func isStdout(path string) bool { return path == "" || path == "-" }

// writeImagesOrCSV writes rows as a PNG grid when the path ends in .png
// (a model of a table read by type writes its rows as the table's cells:
// data.Encoding.Decode)
// and the model was trained on images, else as CSV.
func writeImagesOrCSV(e *env, path string, x []float32, rows int, schema data.Schema, width int) error {
	if strings.EqualFold(filepath.Ext(path), ".png") {
		image := schema.Image
		if len(image) != 3 {
			return usagef("a PNG grid needs a model trained on images; use a .csv output")
		}
		cols := 8
		if rows <= 12 {
			cols = rows
		}
		return report.ImageGrid(path, x, image[0], image[1], image[2], cols, 3)
	}
	header := schema.Columns
	if len(header) != width {
		header = names("c", width)
	}
	w, closeOut, err := output(e, path)
	if err != nil {
		return err
	}
	if enc := schema.Encoding; enc != nil && enc.Width() == width {
		// a table's rows, as its cells: levels, texts, ranges kept
		cw := csv.NewWriter(w)
		cw.Write(enc.Names())
		var cells []string
		for r := range rows {
			cells = enc.Decode(cells[:0], x[r*width:(r+1)*width])
			cw.Write(cells)
		}
		cw.Flush()
		if err := cw.Error(); err != nil {
			return err
		}
		return closeOut()
	}
	if err := writeRows(w, header, x, rows); err != nil {
		return err
	}
	return closeOut()
}

func cmdSample(e *env, args []string) error {
	fs := newFlags(e, "sample", "-model MODEL [-n N] [-seed S] [-out FILE.csv|FILE.png]")
	modelPath := fs.String("model", "", "generative model file: a VAE or a GAN (required)")
	n := fs.Int("n", 16, "number of samples")
	seed := fs.Uint64("seed", 1, "random seed: same seed, same samples")
	class := fs.Int("class", -1, "class to sample from a conditional model (-1: any)")
	out := fs.String("out", "-", "CSV file, or PNG grid for image models")
	quiet := fs.Bool("quiet", false, "no progress output")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	if *n <= 0 || *n > 1_000_000 {
		return usagef("-n must be in 1..1000000")
	}
	st := newStatus(e.stderr, *quiet)
	defer st.end() // an error return leaves no phase drawn or ticking
	st.begin("open", nil)
	l, smp, err := openAs[model.Sampler]("sample", "a generative model (a VAE or a GAN)", map[string]string{"-out": *out, "-model": *modelPath})
	if err != nil {
		return err
	}
	st.begin("sample", func() string { return fmt.Sprintf("%d rows", *n) })
	var x []float32
	if *class != -1 {
		cs, ok := l.model.(model.ClassSampler)
		if !ok || cs.Classes() == 0 {
			return usagef("-class applies to conditional models only")
		}
		x, err = cs.Generate(*n, *seed, *class)
	} else {
		x, err = smp.Sample(*n, *seed)
	}
	if err != nil {
		return err
	}
	st.begin("write", nil)
	if err := writeImagesOrCSV(e, *out, x, *n, l.model.Schema(), l.model.Width()); err != nil {
		return err
	}
	if !isStdout(*out) {
		st.say("wrote %s: %d samples", *out, *n)
	}
	st.done()
	return nil
}

func cmdInterpolate(e *env, args []string) error {
	fs := newFlags(e, "interpolate", "-model MODEL -data FILE -from ROW -to ROW [-steps N] [-out FILE]")
	modelPath := fs.String("model", "", "model file with a latent space to walk: a VAE (required)")
	var d dataFlags
	d.registerForModel(fs)
	from := fs.Int("from", 1, "first row (1-based)")
	to := fs.Int("to", 2, "last row (1-based)")
	steps := fs.Int("steps", 8, "points on the path, ends included")
	path := fs.String("path", "spherical", "linear or spherical")
	out := fs.String("out", "-", "CSV file, or PNG grid for image models")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	if *steps < 2 || *steps > 10000 {
		return usagef("-steps must be in 2..10000")
	}
	l, ip, err := openAs[model.Interpolator]("interpolate", "a model with a latent space to walk (a VAE)",
		map[string]string{"-data": d.path, "-out": *out, "-model": *modelPath})
	if err != nil {
		return err
	}
	ds, err := l.loadRows(&d, nil)
	if err != nil {
		return err
	}
	if *from < 1 || *from > ds.Rows || *to < 1 || *to > ds.Rows {
		return usagef("-from and -to must be rows 1..%d", ds.Rows)
	}
	x, err := ip.Interpolate(ds.Row(*from-1), ds.Row(*to-1), *steps, vae.Path(*path))
	if err != nil {
		return err
	}
	schema := l.model.Schema()
	if schema.Image == nil {
		schema.Image = ds.Image
	}
	return writeImagesOrCSV(e, *out, x, *steps, schema, l.model.Width())
}

func cmdInspect(e *env, args []string) error {
	fs := newFlags(e, "inspect", "MODEL")
	if _, err := parse(e, fs, args, 1); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usagef("inspect takes one model file")
	}
	path := fs.Arg(0)
	l, err := loadModel(path)
	if err != nil {
		return err
	}
	st, err := os.Stat(path)
	if err != nil {
		return err
	}
	w := e.stdout
	m := l.model
	fmt.Fprintf(w, "file        %s (%d bytes, format version %d, checksum verified)\n", path, st.Size(), l.file.Version)
	fmt.Fprintf(w, "kind        %s\n", m.Kind())
	if cfg, ok := sectionLine(l.file, "config"); ok {
		fmt.Fprintf(w, "settings    %s\n", readableSettings(cfg))
	}
	if enc := m.Schema().Encoding; enc != nil && !enc.Plain() {
		fmt.Fprintf(w, "fields      %s\n", enc.Describe())
	}
	if n, ok := m.(model.ScoreNamer); ok {
		fmt.Fprintf(w, "score       %s\n", n.ScoreName())
	}
	if sc, ok := m.(model.Scorer); ok {
		if th := sc.Calibrated(); th != nil {
			how := "calibration rows"
			if th.CrossFitted {
				how = "cross-fitted calibration rows"
			}
			bound := ""
			if th.FalseAlarmBound > 0 {
				bound = fmt.Sprintf(", below %.2f%% with %.0f%% confidence", 100*th.FalseAlarmBound, 100*anomaly.BoundConfidence)
			}
			fmt.Fprintf(w, "threshold   %.6g (%s, expected false-alarm rate %.2f%%%s, %d %s)\n", th.Value, th.Method, 100*th.ExpectedFalseAlarm, bound, th.Rows, how)
		} else {
			fmt.Fprintln(w, "threshold   none")
		}
	}
	for _, n := range m.Networks() {
		var parts []string
		conv := func(c *layers.Conv) {
			s := c.Shape
			oh, ow := s.Out()
			from, to := fmt.Sprintf("%dx%dx%d", s.H, s.W, s.C), fmt.Sprintf("%dx%dx%d", oh, ow, s.OutC)
			what := "conv"
			if c.Transposed {
				from, to, what = to, from, "transposed conv"
			}
			parts = append(parts, fmt.Sprintf("%s->%s %s %dx%d %s", from, to, what, s.KH, s.KW, c.Act))
		}
		for _, c := range n.Front {
			conv(c)
		}
		for _, d := range n.Layers {
			parts = append(parts, fmt.Sprintf("%d->%d %s", d.In, d.Out, d.Act))
		}
		for _, c := range n.Back {
			conv(c)
		}
		fmt.Fprintf(w, "%-11s %s\n", n.Name, strings.Join(parts, ", "))
	}
	params := m.Params()
	total := 0
	for _, p := range params {
		total += p.Len()
	}
	fmt.Fprintf(w, "parameters  %d in %d tensors (%s)\n", total, len(params), params[0].Precision())
	if sch := m.Schema(); len(sch.Image) == 3 {
		fmt.Fprintf(w, "rows        images of %dx%d, %d channels\n", sch.Image[0], sch.Image[1], sch.Image[2])
	} else if len(sch.Columns) > 0 {
		fmt.Fprintf(w, "columns     %s\n", strings.Join(sch.Columns, ", "))
	}
	var rec runRecord
	if ok, err := l.file.Section(commandSection, &rec); err == nil && ok {
		for _, c := range rec.Chosen {
			fmt.Fprintf(w, "chosen      %s\n", c)
		}
	}
	if p, err := modelfile.ProvenanceOf(l.file); err == nil && p != nil {
		fmt.Fprintf(w, "data        %s, %d rows, fingerprint %s\n", p.DataFile, p.DataRows, p.DataFingerprint)
	}
	if sum, ok, err := train.SummaryOf(l.file); err == nil && ok {
		line := fmt.Sprintf("%d epochs, final training loss %.6g", sum.Epochs, sum.TrainLoss)
		if !math.IsNaN(sum.ValidationLoss) {
			line += fmt.Sprintf(", validation loss %.6g", sum.ValidationLoss)
		}
		line += fmt.Sprintf(", best epoch %d", sum.BestEpoch)
		if sum.StoppedEarly {
			line += ", stopped early"
		}
		if sum.Warnings > 0 {
			line += fmt.Sprintf(", %d warnings", sum.Warnings)
		}
		fmt.Fprintf(w, "summary     %s\n", line)
		if tr, ok := sectionLine(l.file, "training"); ok {
			fmt.Fprintf(w, "training    %s\n", tr)
		}
	}
	var meta map[string]json.RawMessage
	if json.Unmarshal(l.file.Meta, &meta) == nil {
		keys := make([]string, 0, len(meta))
		for k := range meta {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		fmt.Fprintf(w, "metadata    %s\n", strings.Join(keys, ", "))
	}
	return nil
}

// sectionLine is a metadata section as one line of compact JSON (the
// training section's settings only).
func sectionLine(f *modelfile.File, key string) (string, bool) {
	var raw json.RawMessage
	ok, err := f.Section(key, &raw)
	if !ok || err != nil {
		return "", false
	}
	if key == "training" {
		var t struct {
			Settings json.RawMessage `json:"settings"`
		}
		if json.Unmarshal(raw, &t) != nil || t.Settings == nil {
			return "", false
		}
		raw = t.Settings
	}
	var b bytes.Buffer
	if json.Compact(&b, raw) != nil {
		return "", false
	}
	return b.String(), true
}

// readableSettings writes a model's settings (a JSON object whose keys
// are the configuration's field names) as key=value pairs in snake case,
// in the file's order, leaving out fields at their zero value:
// {"Inputs":6,"CodeActivation":"identity","Dropout":0} becomes
// "inputs=6 code_activation=identity".
func readableSettings(js string) string {
	dec := json.NewDecoder(strings.NewReader(js))
	if t, err := dec.Token(); err != nil || t != json.Delim('{') {
		return js
	}
	var parts []string
	for dec.More() {
		k, err := dec.Token()
		if err != nil {
			return js
		}
		var v json.RawMessage
		if err := dec.Decode(&v); err != nil {
			return js
		}
		val := string(v)
		switch val {
		case "null", "false", "0", `""`, "[]", "{}":
			continue
		}
		if len(val) > 1 && val[0] == '"' {
			var s string
			if json.Unmarshal(v, &s) == nil && !strings.ContainsAny(s, " =") {
				val = s
			}
		}
		parts = append(parts, snake(fmt.Sprint(k))+"="+val)
	}
	return strings.Join(parts, " ")
}

// snake turns a Go field name into snake case: CodeActivation ->
// code_activation, HeadHidden -> head_hidden, GenHidden -> gen_hidden.
func snake(name string) string {
	var b strings.Builder
	rs := []rune(name)
	for i, r := range rs {
		upper := r >= 'A' && r <= 'Z'
		if upper && i > 0 && (rs[i-1] < 'A' || rs[i-1] > 'Z' || (i+1 < len(rs) && rs[i+1] >= 'a' && rs[i+1] <= 'z')) {
			b.WriteByte('_')
		}
		if upper {
			r += 'a' - 'A'
		}
		b.WriteRune(r)
	}
	return b.String()
}

// writeHeatMaps writes a heat map (report.HeatMap) of each flagged image
// among scores, the scores of ds's rows from lo on, into dir as
// row-N.png, and returns how many it wrote.
func writeHeatMaps(dir string, ex model.Explainer, ds *data.Dataset, lo int, scores []anomaly.Score) (int, error) {
	h, w, c := ds.Image[0], ds.Image[1], ds.Image[2]
	var rows []int
	for i, s := range scores {
		if s.Anomaly && s.Unscorable == "" {
			rows = append(rows, lo+i)
		}
	}
	if len(rows) == 0 {
		return 0, nil
	}
	x := make([]float32, 0, len(rows)*ds.Cols)
	for _, r := range rows {
		x = append(x, ds.X[r*ds.Cols:(r+1)*ds.Cols]...)
	}
	contrib, err := ex.Departures(x, len(rows))
	if err != nil {
		return 0, err
	}
	for k, r := range rows {
		path := filepath.Join(dir, fmt.Sprintf("row-%d.png", r+1))
		if _, err := report.HeatMap(path, x[k*ds.Cols:(k+1)*ds.Cols], contrib[k*ds.Cols:(k+1)*ds.Cols], h, w, c, 4, 0); err != nil {
			return k, fmt.Errorf("-heatmaps: %w", err)
		}
	}
	return len(rows), nil
}
