package main

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/signal"
	"strings"
	"syscall"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/train"
)

// checkStream refuses what a streamed training run cannot do, in the
// flags' words, before any work.
func (o *trainOpts) checkStream(set map[string]bool) error {
	for _, f := range []string{"every", "checkpoint", "watch", "label", "labels", "keep", "supervised", "conditional", "channels"} {
		if set[f] {
			return usagef("-%s with -stream: a streamed run trains an autoencoder or a VAE on a table of numbers, written once at the end (no -every, -checkpoint, -watch, labels or convolutions yet)", f)
		}
	}
	if set["report"] && o.group == "" {
		return usagef("-report with -stream: a streamed run of one model writes no report yet (a fleet's, -group, does)")
	}
	if o.group != "" && o.cache == "none" {
		return usagef("-cache none with -group: a streamed fleet regroups its rows on disk, in -cache's folder")
	}
	switch {
	case o.data.types != "" || o.data.missing != "":
		return usagef("-types and -missing with -stream: a streamed table is read as numbers, every cell (categories and missing cells need the table in memory)")
	case o.kind == gan.Kind:
		return usagef("-stream with -kind gan: a GAN trains on a table in memory")
	case set["folds"] && o.folds > 0:
		return usagef("-folds %d with -stream: cross-fitting trains a model per fold on rows held in memory; a streamed run holds out -val rows instead", o.folds)
	case o.buffer < 0:
		return usagef("-buffer %d: want a number of rows (0: the default %d)", o.buffer, train.DefaultShuffleBuffer)
	case o.val == 0 && o.patience > 0:
		return usagef("-patience needs a validation split (-val > 0)")
	}
	return nil
}

// trainStream trains one model on a CSV table read from its file on
// every epoch: the first pass checks it and gathers what training needs
// (the split, each column's statistics, a sample of rows for the
// defaults and the distance score), the epochs read it again through a
// shuffle buffer, and the threshold is set on the validation rows
// streamed.
func trainStream(e *env, st *status, o *trainOpts, set map[string]bool) error {
	if o.data.path == "" || o.data.path == "-" {
		return usagef("-stream reads a file again on every epoch: give -data FILE (not standard input)")
	}
	format, err := data.Detect(o.data.path)
	if err != nil {
		return fmt.Errorf("cannot read data: %w", err)
	} else if format != data.FormatCSV && format != data.FormatParquet {
		return usagef("-stream reads CSV files (plain or gzip) and Parquet files; %s is %s", o.data.path, format)
	}
	comma, err := o.data.separator()
	if err != nil {
		return err
	}
	cfg := data.StreamConfig{
		CSV:        data.CSVConfig{NoHeader: o.data.noHeader, SkipLines: o.data.skip, Columns: splitList(o.data.columns), Comma: comma, Limits: o.data.limits.l},
		Validation: o.val,
		SplitSeed:  o.seed,
	}
	switch o.cache {
	case "none":
	case "":
		cfg.CacheDir = os.TempDir()
	default:
		if st, err := os.Stat(o.cache); err != nil || !st.IsDir() {
			return usagef("-cache %s: not a folder (give a folder for the rows' binary copy, or none)", o.cache)
		}
		cfg.CacheDir = o.cache
	}
	st.begin("read", func() string { return o.data.path })
	s, err := data.OpenStream(o.data.path, cfg)
	st.end()
	if err == nil {
		defer s.Close()
	}
	var le *data.LimitError
	if errors.As(err, &le) {
		return fmt.Errorf("%w (raise it with -limit %s=N)", err, le.Key)
	}
	if err != nil {
		return err
	}
	why, err := o.chooseDefaults(s.Sample, s.TrainRows, "training rows", set)
	if err != nil {
		return err
	}
	from := "read again from the file"
	if cfg.CacheDir != "" {
		from = fmt.Sprintf("read from a binary copy in %s (%s, removed at the end)", cfg.CacheDir, sizeText(int64(s.Rows)*int64(s.Cols)*4))
	}
	why = append(why, fmt.Sprintf("streamed: %d rows %s on every epoch through a shuffle buffer of %d rows; %d held out for validation and the threshold (each row with probability %v); the scaler fitted on every training row, the defaults (and an autoencoder's distance score) on a seeded sample of %d of them",
		s.Rows, from, min(o.bufferRows(), s.TrainRows), s.ValRows, o.val, s.Sample.Rows))
	m, obj, err := o.build(s.Sample)
	if err != nil {
		return err
	}
	for _, c := range s.Constant() {
		st.warn("warning: %s never changes: no information to learn (leave it out with -columns)", c)
	}
	// the warnings of a run in memory about the rows' number
	params := 0
	if p, ok := m.(interface{ Params() []*layers.Param }); ok {
		for _, x := range p.Params() {
			params += x.Len()
		}
	}
	switch {
	case s.TrainRows < minRows:
		st.warn("warning: %s: too few to learn from (fewer than %d); expect scores that mean little", plural(s.TrainRows, "training row"), minRows)
	case params > 0 && s.TrainRows*weightsPerRow < params:
		st.warn("warning: %d training rows for %d parameters (more than %d a row): the model can memorise the rows; consider narrower -hidden and -latent", s.TrainRows, params, weightsPerRow)
	}
	if enc, ok := m.(model.Encoder); ok && enc.CodeWidth() >= s.Cols {
		st.warn("warning: the code is %d wide for %d input columns: it can pass the input through unchanged; give -latent below %d", enc.CodeWidth(), s.Cols, s.Cols)
	}
	ts := train.Settings{Epochs: o.epochs, BatchSize: o.batch, Patience: o.patience, Objective: obj,
		Optimizer: train.Optimizer{Rate: o.rate, WeightDecay: o.decay, Beta1: o.beta1, Beta2: o.beta2, ClipNorm: o.clip}}
	t, err := train.New(m, ts)
	if err != nil {
		return usageError{err.Error()}
	}
	var cb train.Callbacks
	cb.OnStep = st.step
	cb.OnEpoch = func(p train.Progress, h *train.History) error { st.epoch(p, h); return nil }
	cb.OnWarning = func(w train.Warning) { st.warn("warning at step %d: %s", w.Step, w.Message) }
	t.SetCallbacks(cb)
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	st.begin("train", nil)
	h, err := t.RunStream(ctx, s, train.StreamSettings{Buffer: o.bufferRows()})
	st.end()
	if err != nil {
		if errors.Is(err, context.Canceled) {
			return fmt.Errorf("interrupted; a streamed run writes no checkpoint: start it again")
		}
		return err
	}
	mm := t.Model().(model.Model)
	scoreLine := ""
	if p, ok := mm.(model.Profiler); ok && cmpScore(o.score) == scoreDistance {
		st.begin("profile", func() string { return fmt.Sprintf("a sample of %d training rows", s.Sample.Rows) })
		var err error
		if rf, ok := mm.(residualFitter); ok {
			// too few rows for the autoencoder's part, as in memory
			err = rf.FitProfileWith(s.Sample.X, s.Sample.Rows, ae.ProfileSettings{InputOnly: s.TrainRows < minRows})
		} else {
			err = p.FitProfile(s.Sample.X, s.Sample.Rows)
		}
		st.end()
		if err != nil && !errors.Is(err, anomaly.ErrNoProfile) {
			return err
		}
		if err == nil {
			scoreLine = profileLine(mm)
		}
	}
	var th *anomaly.Threshold
	if sc, ok := mm.(model.Scorer); ok && s.ValRows > 0 {
		st.begin("calibrate", func() string { return fmt.Sprintf("%d validation rows, streamed", s.ValRows) })
		scores := make([]float64, 0, s.ValRows)
		err := s.Each(data.ValRows, func(x []float32, rows int) error {
			v, err := sc.RowScores(x, rows)
			scores = append(scores, v...)
			return err
		})
		if err != nil {
			return err
		}
		cal := anomaly.Config{Method: anomaly.Method(o.method), FalseAlarm: o.falseAlarm}
		got, err := anomaly.Calibrate(scores, cal)
		if err != nil && o.method == string(anomaly.Quantile) && strings.Contains(err.Error(), "needs at least") {
			st.warn("warning: %v; using the largest validation score instead", err)
			got, err = anomaly.Calibrate(scores, anomaly.Config{Method: anomaly.Max})
		}
		if err == nil && got.Rows < anomaly.MinCalibrationRows {
			st.warn("warning: the threshold rests on %s (fewer than %d): its false-alarm rate is only known to be below %.1f%% (%.0f%% confidence)", plural(got.Rows, "validation row"), anomaly.MinCalibrationRows, 100*got.FalseAlarmBound, 100*anomaly.BoundConfidence)
		}
		st.end()
		if err != nil {
			st.warn("no threshold set: %v", err)
		} else if setter, ok := mm.(thresholdSetter); ok {
			setter.SetThreshold(got)
			th = &got
		}
	}
	st.begin("write", nil)
	prov := &modelfile.Provenance{DataFile: o.data.path, DataFormat: string(format), DataFingerprint: s.Fingerprint, DataRows: s.Rows}
	rec := runRecord{Data: o.data.spec(), Validation: o.val, SplitSeed: o.seed, FalseAlarm: o.falseAlarm, Threshold: o.method, Score: cmpScore(o.score), Chosen: why}
	f, err := t.File(prov)
	if err == nil {
		err = f.SetSection(commandSection, rec)
	}
	if err == nil {
		err = modelfile.Write(o.out, f)
	}
	if err != nil {
		return err
	}
	st.end()
	tl, vl := h.Loss(len(h.Epochs))
	line := fmt.Sprintf("wrote %s: %s, %s on %d streamed rows, final training loss %.6g", o.out, kindPhrase(mm.Kind()), plural(len(h.Epochs), "epoch"), s.TrainRows, tl)
	if s.ValRows > 0 {
		line += fmt.Sprintf(", validation loss %.6g (lowest at epoch %d", vl, h.BestEpoch)
		if ts := t.Settings(); ts.Patience > 0 && !ts.KeepLast {
			line += ", whose weights are kept)"
		} else {
			line += "; the last epoch's weights are kept)"
		}
	}
	if h.StoppedEarly {
		line += ", stopped early"
	}
	st.result("%s", line)
	for _, c := range why {
		st.say("chosen: %s", c)
	}
	if scoreLine != "" {
		st.say("%s", scoreLine)
	}
	if th != nil {
		st.result("threshold %.6g (%s), expected false-alarm rate %.2f%%, below %.2f%% with %.0f%% confidence, on data like the %s", th.Value, th.Method, 100*th.ExpectedFalseAlarm, 100*th.FalseAlarmBound, 100*anomaly.BoundConfidence, plural(th.Rows, "validation row"))
	}
	st.done()
	return nil
}

// bufferRows is the -buffer flag's rows (0: the default).
func (o *trainOpts) bufferRows() int {
	if o.buffer > 0 {
		return o.buffer
	}
	return train.DefaultShuffleBuffer
}

// cmpScore is the -score flag with its default.
func cmpScore(s string) string {
	if s == "" {
		return scoreDistance
	}
	return s
}

// sizeText writes a byte count in MiB or GiB.
func sizeText(n int64) string {
	if n >= 1<<30 {
		return fmt.Sprintf("%.1f GiB", float64(n)/(1<<30))
	}
	return fmt.Sprintf("%.1f MiB", float64(n)/(1<<20))
}

// trainFleetStream trains a fleet from a CSV file too large to hold: the
// file is read twice and its rows regrouped on disk (data.PartitionCSV),
// then each member reads its group's rows alone. The fleet is the one
// the same rows give in memory, bit for bit.
func trainFleetStream(e *env, st *status, o *trainOpts, set map[string]bool) error {
	if o.data.path == "" || o.data.path == "-" {
		return usagef("-stream reads a file twice: give -data FILE (not standard input)")
	}
	if f, err := data.Detect(o.data.path); err != nil {
		return fmt.Errorf("cannot read data: %w", err)
	} else if f != data.FormatCSV {
		return usagef("-group with -stream: a streamed fleet is read from a CSV file (plain or gzip); %s is %s", o.data.path, f)
	}
	comma, err := o.data.separator()
	if err != nil {
		return err
	}
	dir := os.TempDir()
	if o.cache != "" {
		if fi, err := os.Stat(o.cache); err != nil || !fi.IsDir() {
			return usagef("-cache %s: not a folder (give a folder for the regrouped rows)", o.cache)
		}
		dir = o.cache
	}
	cfg := data.CSVConfig{NoHeader: o.data.noHeader, SkipLines: o.data.skip, Columns: splitList(o.data.columns), Comma: comma, Limits: o.data.limits.l}
	// the markers a typed reading in memory records in the encoding
	// (-missing is refused with -stream: the default ones)
	markers := data.DefaultMissing
	st.begin("group", func() string { return "regrouping " + o.data.path + " on disk" })
	p, err := data.PartitionCSV(o.data.path, cfg, o.group, markers, dir)
	if err != nil {
		var pe *data.ParseError
		if errors.As(err, &pe) && strings.Contains(pe.Msg, "to keep is not in the header") {
			_, cols, _ := strings.Cut(pe.Msg, "(columns: ")
			return usagef("-group %s: %s has no such column (its columns: %s", o.group, o.data.path, cols)
		}
		return err
	}
	defer p.Close()
	fr := fleetRows{rows: p.Rows, ungrouped: p.Ungrouped, fingerprint: p.Fingerprint, counts: make(map[string]int, len(p.Groups))}
	at := make(map[string]int, len(p.Groups))
	for i, g := range p.Groups {
		fr.counts[g.Key], at[g.Key] = g.Rows, i
	}
	fr.group = func(k string) (*data.Dataset, error) { return p.Group(at[k]) }
	fr.sample = p.Sample
	return trainFleetFrom(e, st, o, set, fr, data.FormatCSV)
}
