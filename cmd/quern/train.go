package main

import (
	"cmp"
	"context"
	"errors"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"os/signal"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"syscall"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
)

type trainOpts struct {
	kind       string
	data       dataFlags
	out        string
	hidden     string
	channels   string
	kernel     int
	latent     int
	epochs     int
	batch      int
	rate       float64
	decay      float64
	beta1      float64
	beta2      float64
	clip       float64
	seed       uint64
	val        float64
	patience   int
	scaling    string
	activation string
	denoise    string
	sparsity   string
	loss       string
	supervised bool
	likelihood string
	beta       float64
	warmup     int
	freeBits   float64
	noiseDim   int
	discSteps  int
	pack       int
	cond       bool
	falseAlarm float64
	method     string
	score      string
	folds      int
	checkpoint string
	every      int
	resume     string
	report     string
	watch      string
	quiet      bool
	// fleets (-group)
	group   string
	minRows int
	shared  int
	shard   string
	member  bool // training one member of a fleet
	stream  bool
	buffer  int
	cache   string
	// settings are the flags given that shape the models (fleets record
	// them: shards must agree)
	settings []string
}

func trainFlags(e *env, o *trainOpts) *flag.FlagSet {
	fs := newFlags(e, "train", "-kind ae|vae|gan -data FILE -out MODEL [flags]\n       quern train -resume CHECKPOINT [-out MODEL] [-data FILE] [-limit KEY=N] [-epochs N]")
	fs.StringVar(&o.kind, "kind", "ae", "model kind: ae (autoencoder), vae (variational autoencoder) or gan")
	o.data.register(fs, true)
	o.data.registerTyped(fs)
	fs.StringVar(&o.out, "out", "", "model file to write (required, except when resuming CHECKPOINT.ckpt)")
	fs.StringVar(&o.hidden, "hidden", "", "comma-separated hidden layer widths, or none (default: ae and vae one layer, 2 per input column within 16..256, narrower on small tables to keep about 4 weights per training row, none after -channels; gan the model's)")
	fs.StringVar(&o.channels, "channels", "", "images: comma-separated output channels of stride-2 convolutions, from the image inward (for example 32,64); encoders and discriminators read the image through them, decoders and generators end with their transposes (default none: dense layers only)")
	fs.IntVar(&o.kernel, "kernel", 0, "side of the -channels convolutions' square kernels (default 3)")
	fs.IntVar(&o.latent, "latent", 0, "code / latent width (default: ae and vae the principal components for 90% of the variance, at most 64; gan none)")
	fs.IntVar(&o.epochs, "epochs", 0, "training epochs (when resuming: the run's new total); default: ae and vae about 10000 steps with early stopping, gan 20")
	fs.IntVar(&o.batch, "batch", 64, "mini-batch size")
	fs.Float64Var(&o.rate, "rate", 0, "learning rate (default: the model kind's)")
	fs.Float64Var(&o.decay, "weight-decay", 0, "decoupled weight decay of the Adam updates (AdamW; 0: none)")
	fs.Float64Var(&o.beta1, "adam-beta1", 0, "Adam's first-moment decay in [0, 1) (default 0.9)")
	fs.Float64Var(&o.beta2, "adam-beta2", 0, "Adam's second-moment decay in [0, 1) (default 0.999)")
	fs.Float64Var(&o.clip, "clip", 0, "clip the gradients to this global norm (0: no clipping)")
	fs.Uint64Var(&o.seed, "seed", 1, "random seed: same seed, same data, same model")
	fs.Float64Var(&o.val, "val", 0.1, "fraction of rows held out for validation (and, for ae and vae, threshold calibration)")
	fs.IntVar(&o.patience, "patience", 0, "stop after this many epochs without validation improvement (0: never; default with the default length: about 1000 steps)")
	fs.StringVar(&o.scaling, "scaling", "", "column scaling: standard, minmax or none (default: by kind and data)")
	fs.StringVar(&o.activation, "activation", "", "hidden activation: relu, leaky_relu, elu, tanh, sigmoid, softplus, identity")
	fs.StringVar(&o.denoise, "denoise", "", "ae: corrupt inputs while training, KIND:LEVEL with KIND gaussian, masking or salt_pepper")
	fs.StringVar(&o.sparsity, "sparsity", "", "ae: sparsity penalty l1:WEIGHT or kl:WEIGHT[:TARGET]")
	fs.StringVar(&o.loss, "loss", "", "ae: reconstruction loss mse or bce (default: bce for images, else mse)")
	fs.BoolVar(&o.supervised, "supervised", false, "ae: add a classification head trained on the labels")
	fs.StringVar(&o.likelihood, "likelihood", "", "vae: bernoulli, gaussian, gaussian_learned or gaussian_shared (default: bernoulli for images, else gaussian_learned: a variance learned per column)")
	fs.Float64Var(&o.beta, "beta", 0, "vae: weight of the KL term (default 1)")
	fs.IntVar(&o.warmup, "warmup", 0, "vae: raise beta linearly over this many steps (KL annealing)")
	fs.Float64Var(&o.freeBits, "free-bits", 0, "vae: minimum KL per latent dimension, in nats")
	fs.IntVar(&o.noiseDim, "noise-dim", 0, "gan: noise dimension (default 16)")
	fs.IntVar(&o.discSteps, "disc-steps", 0, "gan: discriminator updates per generator update (default 1)")
	fs.IntVar(&o.pack, "pack", 0, "gan: samples the discriminator judges together (default 1)")
	fs.BoolVar(&o.cond, "conditional", false, "gan: condition both networks on the labels")
	fs.Float64Var(&o.falseAlarm, "false-alarm", 0.01, "ae, vae: target false-alarm rate of the threshold")
	fs.StringVar(&o.score, "score", "", "ae: anomaly score: distance (of the code and the residual from the training rows') or error (mean reconstruction error); default distance, error for images")
	fs.IntVar(&o.folds, "folds", 0, "ae: cross-fit the residual profile and the threshold over N folds, using every row to train and to calibrate (default 5 for tables of 10 to 20000 rows scored by distance when -val is not given, else 0: -val rows held out and calibrate)")
	fs.StringVar(&o.method, "threshold", "quantile", "ae, vae: threshold method: quantile (for -false-alarm) or max")
	fs.StringVar(&o.checkpoint, "checkpoint", "", "checkpoint file (default: MODEL.ckpt when -every > 0)")
	fs.IntVar(&o.every, "every", 0, "write a checkpoint every N epochs")
	fs.StringVar(&o.resume, "resume", "", "resume from a checkpoint, with the settings it was started with")
	fs.StringVar(&o.report, "report", "", "folder for the PNG figures and HTML report")
	fs.StringVar(&o.watch, "watch", "", "serve a live page of the run at `ADDR` (host:port, or a port on loopback; 0 picks a free port)")
	fs.BoolVar(&o.quiet, "quiet", false, "no progress output")
	fs.StringVar(&o.group, "group", "", "train a fleet: one model per value of this CSV `COLUMN` (each with its own scaling and threshold, seeded from -seed and the value), side by side on the cores; -out names the fleet's folder")
	fs.IntVar(&o.minRows, "min-rows", defaultMinGroupRows, "-group: the fewest rows a group needs for a model of its own; smaller groups are scored by the shared model")
	fs.IntVar(&o.shared, "shared", defaultSharedRows, "-group: rows drawn (seeded) from all groups to train the shared model, which scores small groups and groups not seen in training (0: no shared model; their rows are refused)")
	fs.BoolVar(&o.stream, "stream", false, "read the CSV or Parquet file again on every epoch instead of holding it: for tables of numbers larger than memory (ae and vae; the rows are shuffled through a buffer of -buffer rows, the threshold set on the -val rows streamed)")
	fs.IntVar(&o.buffer, "buffer", 0, fmt.Sprintf("-stream: rows of the shuffle buffer; each batch draws from the next this many rows of the file, so a file sorted by time trains on a sliding window of it (default %d)", train.DefaultShuffleBuffer))
	fs.StringVar(&o.cache, "cache", "", "-stream: `FOLDER` for a binary copy of the rows (4 bytes a value), which every epoch reads instead of parsing the file again; none: parse it every time (default: the system's temporary folder)")
	fs.StringVar(&o.shard, "shard", "", "-group: train only shard `I/N` of the fleet (I from 0), for an array job; quern merge assembles the shards' folders into the fleet")
	return fs
}

// runRecord is the command line's own section of the files it writes:
// how the data were read and split and how the threshold is set, so that
// a resumed run does the same. Output paths are not recorded: a
// checkpoint never decides where a resumed run writes.
type runRecord struct {
	Data       dataSpec `json:"data"`
	Validation float64  `json:"validation"`
	SplitSeed  uint64   `json:"split_seed"`
	FalseAlarm float64  `json:"false_alarm"`
	Threshold  string   `json:"threshold"`
	Score      string   `json:"score,omitempty"`
	// CrossFit holds what cross-fitting found (nil: a held-out split).
	CrossFit *crossFitRecord `json:"cross_fit,omitempty"`
	Every    int             `json:"every,omitempty"`
	// Chosen says what the defaults chose from the data, and why.
	Chosen []string `json:"chosen,omitempty"`
}

// The -score values.
const (
	scoreDistance = "distance"
	scoreError    = "error"
)

// commandSection is the record's section name in model files.
const commandSection = "command"

func cmdTrain(e *env, args []string) error {
	var o trainOpts
	fs := trainFlags(e, &o)
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	set := map[string]bool{}
	o.settings = []string{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	// the flags that shape the models, where they differ from the
	// default (a default given or left out is the same run)
	fs.VisitAll(func(f *flag.Flag) {
		if !nonSettings[f.Name] && f.Value.String() != f.DefValue {
			o.settings = append(o.settings, "-"+f.Name+"="+f.Value.String())
		}
	})
	if o.resume != "" {
		if o.group != "" {
			return usagef("-group with -resume: a fleet is not resumed; train it again (each member is the same model for the same seed)")
		}
		return resumeTrain(e, o, set)
	}
	if o.out == "" {
		return usagef("-out is required")
	}
	if !slices.Contains(model.Kinds(), o.kind) {
		return usagef("-kind must be one of %s, not %q", strings.Join(model.Kinds(), ", "), o.kind)
	}
	if err := o.checkNumbers(); err != nil {
		return err
	}
	if o.stream {
		if err := o.checkStream(set); err != nil {
			return err
		}
	} else if set["buffer"] || set["cache"] {
		name := "buffer"
		if !set["buffer"] {
			name = "cache"
		}
		return usagef("-%s is for a streamed run: give -stream", name)
	}
	if o.group != "" {
		if err := o.checkFleet(set); err != nil {
			return err
		}
	} else if set["min-rows"] || set["shared"] || set["shard"] {
		return usagef("-min-rows, -shared and -shard are for fleets: give -group COLUMN")
	}
	if o.every > 0 && o.checkpoint == "" {
		o.checkpoint = o.out + ".ckpt"
	}
	if err := distinctPaths(map[string]string{"-data": o.data.path, "-out": o.out, "-checkpoint": o.checkpoint}); err != nil {
		return err
	}
	for flagName, p := range map[string]string{"-out": o.out, "-checkpoint": o.checkpoint} {
		if o.group != "" {
			break // a fleet's folder, checked by checkFleet
		}
		if p != "" {
			if err := writable(p, flagName); err != nil {
				return err
			}
		}
	}
	score := cmp.Or(o.score, scoreDistance)
	if o.folds > 0 {
		switch {
		case o.kind != ae.Kind || score != scoreDistance:
			return usagef("-folds: cross-fitting is for autoencoders scored by distance (-kind ae, -score distance)")
		case o.loss == string(ae.BCE):
			return usagef("-folds with -loss bce: a BCE autoencoder scores by its reconstruction error, which needs no cross-fitting (give -folds 0, or -loss mse)")
		case set["val"] && o.val > 0:
			return usagef("-folds %d with -val %v: cross-fitting trains and calibrates on every row, with no rows held out; give one of them", o.folds, o.val)
		}
	}
	if err := reportFolder(o.report); err != nil {
		return err
	}
	st := newStatus(e.stderr, o.quiet)
	defer st.end() // an error return leaves no phase drawn or ticking
	if o.stream && o.group != "" {
		return trainFleetStream(e, st, &o, set)
	}
	if o.stream {
		return trainStream(e, st, &o, set)
	}
	full, format, err := o.data.load(st)
	if err != nil {
		var pe *data.ParseError
		if o.group != "" && errors.As(err, &pe) && strings.Contains(pe.Msg, "to keep is not in the header") {
			_, cols, _ := strings.Cut(pe.Msg, "(columns: ")
			return usagef("-group %s: %s has no such column (its columns: %s", o.group, o.data.path, cols)
		}
		return err
	}
	if o.group != "" {
		return trainFleet(e, st, &o, set, full, format)
	}
	_, err = trainLoaded(e, st, &o, set, full, format, o.out, o.checkpoint, o.report, o.watch)
	return err
}

// trainLoaded trains, calibrates and writes one model of the loaded rows
// full, as the flags say: the whole of a train command once its data are
// read, or one member of a fleet.
func trainLoaded(e *env, st *status, o *trainOpts, set map[string]bool, full *data.Dataset, format data.Format, out, checkpoint, report, watchAt string) (*outcome, error) {
	score := cmp.Or(o.score, scoreDistance)
	folds := o.folds
	if !set["folds"] {
		folds = 0
		if o.kind == ae.Kind && score == scoreDistance && full.Image == nil && o.loss != string(ae.BCE) &&
			full.Rows < crossFitRows && full.Rows >= 2*defaultFolds && !set["val"] && o.val > 0 {
			folds = defaultFolds
		}
	}
	// the rows the models are sized for: those of a fold model when
	// cross-fitting (the fold models set the length and the threshold)
	fitRows, rowsWhat := full.Rows-int(math.Round(o.val*float64(full.Rows))), "training rows"
	if folds > 0 {
		fitRows, rowsWhat = full.Rows-(full.Rows+folds-1)/folds, "rows in each cross-fit fold's training part"
	}
	why, err := o.chooseDefaults(full, fitRows, rowsWhat, set)
	if err != nil {
		return nil, err
	}
	rec := runRecord{Data: o.data.spec(), Validation: o.val, SplitSeed: o.seed, FalseAlarm: o.falseAlarm, Threshold: o.method, Score: score, Every: o.every, Chosen: why}
	m, obj, err := o.build(full)
	if err != nil {
		return nil, err
	}
	warnVal := o.val
	if folds > 0 {
		warnVal = 0 // the final model trains on every row
	}
	warnings := trainWarnings
	if o.member {
		// a fleet's member: how the file was read is said once, for
		// the fleet
		warnings = modelWarnings
	}
	for _, w := range warnings(m, full, warnVal) {
		st.warn("%s", w)
	}
	s := train.Settings{Epochs: o.epochs, BatchSize: o.batch, Patience: o.patience, Objective: obj,
		Optimizer: train.Optimizer{Rate: o.rate, WeightDecay: o.decay, Beta1: o.beta1, Beta2: o.beta2, ClipNorm: o.clip}}
	if folds > 0 {
		ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
		fs := s
		if !set["epochs"] {
			fs.Epochs = 0 // the default budget for each fold's rows
			if !set["patience"] {
				fs.Patience = 0 // and the default patience
			}
		}
		cf, err := crossFit(ctx, st, o, full, fs, folds, o.seed, anomaly.Config{Method: anomaly.Method(o.method), FalseAlarm: o.falseAlarm})
		stop()
		if err != nil {
			return nil, err
		}
		rec.CrossFit, rec.Validation = cf, 0
		batches := max(1, (full.Rows+o.batch-1)/o.batch)
		length := fmt.Sprintf("for %d epochs (%d steps, the folds' mean at their best)", max(1, (cf.Steps+batches/2)/batches), max(1, (cf.Steps+batches/2)/batches)*batches)
		if set["epochs"] {
			length = fmt.Sprintf("for %d epochs (-epochs)", s.Epochs)
		} else {
			s.Epochs = max(1, (cf.Steps+batches/2)/batches)
		}
		s.Patience = 0
		foldStop := "stopping early on the fold"
		if set["epochs"] && !set["patience"] {
			foldStop = fmt.Sprintf("for %d epochs, without early stopping (-patience adds it)", s.Epochs)
		}
		rec.Chosen = append(rec.Chosen, fmt.Sprintf("cross-fitted over %d folds: a model per fold trained on the others (%s) gave every row a held-out residual and score, for the residual profile and the threshold; the final model trains on all %d rows %s (-folds 0 holds out -val rows instead)", folds, foldStop, full.Rows, length))
		// the length line chooseDefaults wrote was for a held-out split
		rec.Chosen = slices.DeleteFunc(rec.Chosen, func(c string) bool { return strings.HasPrefix(c, "length:") })
	}
	if s.Patience > 0 && o.val == 0 {
		return nil, usagef("-patience needs a validation split (-val > 0)")
	}
	t, err := train.New(m, s)
	if err != nil {
		return nil, usageError{err.Error()}
	}
	return runTraining(e, st, t, full, format, rec, out, checkpoint, report, watchAt, o.member)
}

func (o *trainOpts) checkNumbers() error {
	switch {
	case o.epochs < 0:
		return usagef("-epochs %d: want at least 1 (or 0 for the default length)", o.epochs)
	case o.batch <= 0:
		return usagef("-batch %d: want at least 1", o.batch)
	case o.val < 0 || o.val >= 1:
		return usagef("-val %v: want a fraction in [0, 1)", o.val)
	case o.every < 0:
		return usagef("-every %d: want 0 (no checkpoints) or more", o.every)
	case o.patience < 0:
		return usagef("-patience %d: want 0 (no early stopping) or more", o.patience)
	case o.latent < 0:
		return usagef("-latent %d: want at least 1 (or 0 for the model's default)", o.latent)
	case o.kernel < 0 || o.kernel > 64:
		return usagef("-kernel %d: want a side of 1 to 64 (or 0 for the default 3)", o.kernel)
	case o.rate < 0 || math.IsNaN(o.rate) || math.IsInf(o.rate, 0):
		return usagef("-rate %v: want a positive learning rate (or 0 for the kind's default)", o.rate)
	case o.beta < 0 || math.IsNaN(o.beta) || math.IsInf(o.beta, 0):
		return usagef("-beta %v: want a finite weight, 0 or more (0: the default 1)", o.beta)
	case o.warmup < 0:
		return usagef("-warmup %d: want 0 (no annealing) or more steps", o.warmup)
	case o.freeBits < 0 || math.IsNaN(o.freeBits) || math.IsInf(o.freeBits, 0):
		return usagef("-free-bits %v: want a finite number of nats, 0 or more", o.freeBits)
	case o.noiseDim < 0:
		return usagef("-noise-dim %d: want at least 1 (or 0 for the default)", o.noiseDim)
	case o.discSteps < 0:
		return usagef("-disc-steps %d: want at least 1 (or 0 for the default)", o.discSteps)
	case o.pack < 0:
		return usagef("-pack %d: want at least 1 (or 0 for the default)", o.pack)
	case o.decay < 0 || math.IsNaN(o.decay) || math.IsInf(o.decay, 0):
		return usagef("-weight-decay %v: want 0 (none) or a small positive number such as 1e-4", o.decay)
	case !(o.beta1 >= 0 && o.beta1 < 1):
		return usagef("-adam-beta1 %v: want a decay in [0, 1) (0: the default 0.9)", o.beta1)
	case !(o.beta2 >= 0 && o.beta2 < 1):
		return usagef("-adam-beta2 %v: want a decay in [0, 1) (0: the default 0.999)", o.beta2)
	case o.clip < 0 || math.IsNaN(o.clip) || math.IsInf(o.clip, 0):
		return usagef("-clip %v: want 0 (no clipping) or a positive gradient norm", o.clip)
	case o.folds < 0 || o.folds == 1:
		return usagef("-folds %d: want 0 (no cross-fitting) or at least 2", o.folds)
	case o.score != "" && o.score != scoreDistance && o.score != scoreError:
		return usagef("-score %q: want distance or error", o.score)
	case !(o.falseAlarm > 0 && o.falseAlarm < 1):
		return usagef("-false-alarm %v: want a rate between 0 and 1, such as 0.01", o.falseAlarm)
	}
	return nil
}

// resumeTrain continues a run from its checkpoint.
func resumeTrain(e *env, o trainOpts, set map[string]bool) error {
	allowed := map[string]bool{"resume": true, "quiet": true, "report": true, "watch": true, "out": true, "data": true, "epochs": true, "limit": true}
	var bad []string
	for name := range set {
		if !allowed[name] {
			bad = append(bad, "-"+name)
		}
	}
	if len(bad) > 0 {
		return usagef("%s cannot be changed when resuming (the checkpoint keeps the run's settings; -out, -data, -limit, -epochs, -report and -quiet may be given)", strings.Join(bad, ", "))
	}
	if !set["out"] {
		base, ok := strings.CutSuffix(o.resume, ".ckpt")
		if !ok || base == "" {
			return usagef("-out is required when the checkpoint's name does not end in .ckpt")
		}
		o.out = base
	}
	f, err := modelfile.Read(o.resume, 0)
	if err != nil {
		return err
	}
	var rec runRecord
	var override *train.Settings
	ok, err := f.Section(commandSection, &rec)
	if err != nil {
		return err
	}
	if !ok {
		// a checkpoint of an older quern: its settings are command-line
		// strings, read here for the data, the split and the threshold
		// only (never for where to write)
		legacy, err := legacyRun(e, f)
		if err != nil {
			return err
		}
		rec = legacy.rec
		override = &legacy.settings
	}
	if set["epochs"] && o.epochs <= 0 {
		return usagef("-epochs %d: want at least 1", o.epochs)
	}
	if set["epochs"] && override != nil {
		override.Epochs = o.epochs
	}
	t, err := train.Resume(f, override)
	if err != nil {
		return err
	}
	if set["epochs"] {
		// only the length changes: patience and the rest stay the run's
		if err := t.SetEpochs(o.epochs); err != nil {
			return err
		}
	}
	d, err := rec.Data.flags()
	if err != nil {
		return err
	}
	if set["data"] {
		d.path = o.data.path
		rec.Data.Path = o.data.path
	}
	if set["limit"] {
		d.limits = o.data.limits
		rec.Data.Limits = d.limits.String()
	}
	if err := distinctPaths(map[string]string{"-data": d.path, "-out": o.out, "-resume": o.resume}); err != nil {
		return err
	}
	if err := writable(o.out, "-out"); err != nil {
		return err
	}
	if err := reportFolder(o.report); err != nil {
		return err
	}
	st := newStatus(e.stderr, o.quiet)
	defer st.end() // an error return leaves no phase drawn or ticking
	full, format, err := d.load(st)
	if err != nil {
		return err
	}
	if prov, err := modelfile.ProvenanceOf(f); err == nil && prov != nil && prov.DataFingerprint != "" && prov.DataFingerprint != full.Fingerprint() {
		why := ""
		if sm, ok := t.Model().(interface{ Schema() data.Schema }); ok {
			// the same file read differently: say which columns
			var gone []string
			for _, c := range sm.Schema().Columns {
				if !slices.Contains(full.Columns, c) {
					gone = append(gone, c)
				}
			}
			if len(gone) > 0 {
				why = fmt.Sprintf("; the checkpoint's inputs %s are not read now", strings.Join(gone, ", "))
				if len(full.LeftOut) > 0 {
					why += " (" + strings.Join(full.LeftOut, "; ") + ")"
				}
			}
		}
		return fmt.Errorf("%s differs from the data the checkpoint was trained on (fingerprint %.12s..., now %.12s...)%s", d.path, prov.DataFingerprint, full.Fingerprint(), why)
	}
	checkpoint := ""
	if rec.Every > 0 {
		checkpoint = o.resume
	}
	_, err = runTraining(e, st, t, full, format, rec, o.out, checkpoint, o.report, o.watch, false)
	return err
}

// outcome is what a run gives its caller beside the file it wrote.
type outcome struct {
	h   *train.History
	th  *anomaly.Threshold
	val bool // validation rows were held out
}

// runTraining splits the data, trains (writing checkpoints), calibrates
// the threshold of a model that has one, and writes the model file and
// the report, each a phase of st. With unsynced the model file is not
// synced to disk (the caller syncs it).
func runTraining(e *env, st *status, t *train.Trainer, full *data.Dataset, format data.Format, rec runRecord, out, checkpoint, report, watchAt string, unsynced bool) (res *outcome, err error) {
	prov := &modelfile.Provenance{DataFile: rec.Data.Path, DataFormat: string(format), DataFingerprint: full.Fingerprint(), DataRows: full.Rows}
	trainSet, valSet := full, (*data.Dataset)(nil)
	if rec.Validation > 0 {
		var err error
		// in place: the parts are views of the loaded rows, not copies
		// (full is left shuffled; its fingerprint is already taken)
		trainSet, valSet, err = full.SplitInPlace(rec.Validation, rand.New(rand.NewPCG(rec.SplitSeed, stream.Split)))
		if err != nil {
			return nil, fmt.Errorf("-val %v: %w", rec.Validation, err)
		}
	}
	if t.Settings().Patience > 0 && valSet == nil {
		return nil, usagef("-patience needs a validation split (-val > 0)")
	}
	var s train.Callbacks
	saves := 0
	info := runInfo{started: st.begun}
	if report != "" {
		info.fid = newFIDWatch(t.Model().(model.Model), full, rec.SplitSeed)
	}
	var lv *live
	if watchAt != "" {
		if lv, err = startLive(st, watchAt, fmt.Sprintf("%s on %s", kindPhrase(t.Model().(model.Model).Kind()), filepath.Base(rec.Data.Path))); err != nil {
			return nil, err
		}
		lv.val, lv.image, lv.seed, lv.fa = valSet, full.Image, rec.SplitSeed, rec.FalseAlarm
		defer func() {
			if err != nil {
				lv.finish("the run failed: " + oneLine(err.Error()))
			} else {
				lv.finish(fmt.Sprintf("the run has finished: %s written", out))
			}
		}()
	}
	s.OnStep = func(p train.Progress) {
		st.step(p)
		lv.step(p)
	}
	s.OnEpoch = func(p train.Progress, h *train.History) error {
		st.epoch(p, h)
		lv.epoch(p, h, t.Model().(model.Model))
		info.fid.after(t.Model().(model.Model))
		if rec.Every > 0 && checkpoint != "" && p.Epoch%rec.Every == 0 {
			f, err := t.Checkpoint(prov)
			if err == nil {
				err = f.SetSection(commandSection, rec)
			}
			if err != nil {
				return err
			}
			saves++
			if err := writeCheckpoint(checkpoint, f, saves); err != nil {
				return fmt.Errorf("checkpoint: %w", err)
			}
		}
		return nil
	}
	s.OnWarning = func(w train.Warning) {
		st.warn("warning at step %d: %s", w.Step, w.Message)
	}
	t.SetCallbacks(s)
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	st.begin("train", nil)
	h, err := t.Run(ctx, trainSet, valSet)
	st.end()
	if err != nil {
		if errors.Is(err, context.Canceled) {
			return nil, fmt.Errorf("interrupted; the last checkpoint (if any) can be resumed with -resume")
		}
		return nil, err
	}
	m := t.Model().(model.Model)
	scoreLine := ""
	var th *anomaly.Threshold
	if cf := rec.CrossFit; cf != nil {
		rf, ok := m.(residualFitter)
		ts, ok2 := m.(thresholdSetter)
		if !ok || !ok2 {
			return nil, fmt.Errorf("the checkpoint records a cross-fit, but a %s model cannot take one", m.Kind())
		}
		st.begin("profile", func() string { return fmt.Sprintf("%d training rows", trainSet.Rows) })
		err := rf.FitProfileWith(trainSet.X, trainSet.Rows, ae.ProfileSettings{Residual: cf.Residual, InputOnly: cf.InputOnly})
		st.end()
		if err != nil {
			return nil, err
		}
		scoreLine = profileLine(m)
		if cf.ThresholdNote != "" {
			st.warn("%s", cf.ThresholdNote)
		}
		if cf.Threshold != nil {
			ts.SetThreshold(*cf.Threshold)
			th = cf.Threshold
		}
	} else if _, ok := m.(model.Profiler); ok && rec.Score == scoreDistance && trainSet != nil && trainSet.Rows < 2 {
		st.warn("warning: %d training row: scored by the reconstruction error (the distance score needs at least 2 rows)", trainSet.Rows)
	} else if p, ok := m.(model.Profiler); ok && rec.Score == scoreDistance && trainSet != nil {
		// runs recorded before -score existed (Score "") keep the error
		st.begin("profile", func() string { return fmt.Sprintf("%d training rows", trainSet.Rows) })
		var err error
		if rf, ok := m.(residualFitter); ok {
			// too few rows for the autoencoder's part, as when cross-fitting
			err = rf.FitProfileWith(trainSet.X, trainSet.Rows, ae.ProfileSettings{InputOnly: trainSet.Rows < minRows})
		} else {
			err = p.FitProfile(trainSet.X, trainSet.Rows)
		}
		st.end()
		if err != nil && !errors.Is(err, anomaly.ErrNoProfile) {
			return nil, err
		}
		if err == nil {
			scoreLine = profileLine(m)
		}
	}
	if c, ok := m.(model.Calibrator); ok && valSet != nil && rec.CrossFit == nil {
		st.begin("calibrate", func() string { return fmt.Sprintf("%d validation rows", valSet.Rows) })
		got, err := c.Calibrate(valSet.X, valSet.Rows, anomaly.Config{Method: anomaly.Method(rec.Threshold), FalseAlarm: rec.FalseAlarm})
		if err != nil && rec.Threshold == string(anomaly.Quantile) && strings.Contains(err.Error(), "needs at least") {
			st.warn("warning: %v; using the largest validation score instead", err)
			got, err = c.Calibrate(valSet.X, valSet.Rows, anomaly.Config{Method: anomaly.Max})
		}
		if err == nil && got.Rows < anomaly.MinCalibrationRows {
			st.warn("warning: the threshold rests on %s (fewer than %d): its false-alarm rate is only known to be below %.1f%% (%.0f%% confidence)", plural(got.Rows, "validation row"), anomaly.MinCalibrationRows, 100*got.FalseAlarmBound, 100*anomaly.BoundConfidence)
		}
		st.end()
		if err != nil {
			st.warn("no threshold set: %v", err)
		} else {
			th = &got
		}
	}
	if v, ok := m.(*vae.Model); ok && v.Config().Table && trainSet != nil && trainSet.Rows >= 2 {
		// samples with each column distributed as in the training rows
		st.begin("marginals", func() string { return fmt.Sprintf("%d training rows", trainSet.Rows) })
		if err := v.FitMarginals(trainSet.X, trainSet.Rows); err != nil {
			// the model is good without them: its samples keep the
			// decoder's own distribution of each column
			st.warn("warning: no marginal maps for the samples: %v", err)
		}
		st.end()
	}
	st.begin("write", nil)
	f, err := t.File(prov)
	if err == nil {
		err = f.SetSection(commandSection, rec)
	}
	if err != nil {
		return nil, err
	}
	write := modelfile.Write
	if unsynced {
		// a fleet's member: the fleet syncs its files together
		write = modelfile.WriteUnsynced
	}
	if err := write(out, f); err != nil {
		return nil, err
	}
	st.end()
	if report != "" {
		st.begin("report", nil)
		info.th = th
		if err := writeTrainReport(report, m, t.Settings(), rec, h, full, valSet, info); err != nil {
			return nil, err
		}
		st.end()
	}
	tl, vl := h.Loss(len(h.Epochs))
	line := fmt.Sprintf("wrote %s: %s, %d epochs, final training loss %.6g", out, kindPhrase(m.Kind()), len(h.Epochs), tl)
	if valSet != nil {
		if ts := t.Settings(); ts.Patience > 0 && !ts.KeepLast {
			line += fmt.Sprintf(", validation loss %.6g (best epoch %d, whose weights are kept)", vl, h.BestEpoch)
		} else {
			line += fmt.Sprintf(", validation loss %.6g (lowest at epoch %d; the last epoch's weights are kept)", vl, h.BestEpoch)
		}
	}
	if h.StoppedEarly {
		line += ", stopped early"
	}
	st.result("%s", line)
	if enc := full.Encoding; enc != nil && !enc.Plain() {
		st.say("fields: %s", enc.Describe())
	}
	for _, c := range rec.Chosen {
		st.say("chosen: %s", c)
	}
	if scoreLine != "" {
		st.say("%s", scoreLine)
	}
	if th != nil {
		from := plural(th.Rows, "validation row")
		if th.CrossFitted {
			from = plural(th.Rows, "cross-fitted score") + " of the training rows"
		}
		st.result("threshold %.6g (%s), expected false-alarm rate %.2f%%, below %.2f%% with %.0f%% confidence, on data like the %s", th.Value, th.Method, 100*th.ExpectedFalseAlarm, 100*th.FalseAlarmBound, 100*anomaly.BoundConfidence, from)
	}
	if report != "" {
		st.say("report: %s", filepath.Join(report, "index.html"))
	}
	st.done()
	return &outcome{h: h, th: th, val: valSet != nil}, nil
}

// profileLine says in the closing lines what a model's score is.
func profileLine(m model.Model) string {
	if a, ok := m.(*ae.Model); ok && a.Profile != nil && a.Profile.Weight == 0 {
		return fmt.Sprintf("score: each row's distance from the training rows under their shrunk covariance alone, too few rows (under %d) for the autoencoder's part (the training rows average about 1; the threshold marks what is unusual)", minRows)
	}
	return "score: the average of two distances from the training rows, of each row's code and reconstruction residual and of the row under their shrunk covariance (the training rows average about 1; the threshold marks what is unusual)"
}

// kindPhrase names a model kind with its article: "an autoencoder".
func kindPhrase(kind string) string {
	switch kind {
	case ae.Kind:
		return "an autoencoder (ae)"
	case vae.Kind:
		return "a variational autoencoder (vae)"
	case gan.Kind:
		return "a GAN"
	}
	return "a model of kind " + kind
}

// build makes the model the flags describe and its objective.
func (o *trainOpts) build(d *data.Dataset) (train.Model, train.Objective, error) {
	var hidden []int
	if strings.TrimSpace(o.hidden) != "none" {
		h, err := parseInts(o.hidden, "hidden")
		if err != nil {
			return nil, nil, err
		}
		if o.hidden != "" {
			hidden = h
		}
	} else {
		hidden = []int{}
	}
	channels, err := parseInts(o.channels, "channels")
	if err != nil {
		return nil, nil, err
	}
	if len(channels) > 0 && d.Image == nil {
		return nil, nil, usagef("-channels: convolutions read images (a folder of PNG files or an idx file), and %s is a table", o.data.path)
	}
	var act layers.Activation
	if o.activation != "" {
		if act, err = layers.ParseActivation(o.activation); err != nil || act == layers.Default {
			return nil, nil, usagef("-activation: unknown activation %q (want relu, leaky_relu, elu, tanh, sigmoid, softplus or identity)", o.activation)
		}
	}
	image := d.Image != nil
	scaling := data.ScaleKind(o.scaling)
	usage := func(m train.Model, obj train.Objective, err error) (train.Model, train.Objective, error) {
		var pe *layers.PlanError
		if errors.As(err, &pe) {
			// in the flags' words
			msg, k := strings.TrimPrefix(pe.Error(), "layers: "), o.kernel
			if k == 0 {
				k = 3 // the default
			}
			return nil, nil, usagef("-channels %s -kernel %d on %dx%dx%d images: %s", o.channels, k, d.Image[0], d.Image[1], d.Image[2], msg)
		}
		if err != nil {
			return nil, nil, usageError{err.Error()}
		}
		return m, obj, nil
	}
	switch o.kind {
	case ae.Kind:
		c := ae.Config{Inputs: d.Cols, Hidden: hidden, Latent: o.latent, Activation: act, Scaling: scaling, Seed: o.seed, Loss: ae.Reconstruction(o.loss)}
		if len(channels) > 0 {
			c.Image, c.Channels, c.Kernel = d.Image, channels, o.kernel
		}
		var obj train.Reconstruction
		if image {
			if c.Loss == "" {
				c.Loss = ae.BCE
			}
			if c.Scaling == "" {
				c.Scaling = data.ScaleNone
			}
		}
		if d.Encoding != nil && (c.Loss == "" || c.Loss == ae.MSE) {
			// a category's levels reconstructed as probabilities
			c.Categories = d.Encoding.CategorySpans()
		}
		if o.denoise != "" {
			k, lv, ok := strings.Cut(o.denoise, ":")
			l, err := strconv.ParseFloat(lv, 64)
			if !ok || err != nil {
				return nil, nil, usagef("-denoise wants KIND:LEVEL, got %q", o.denoise)
			}
			obj.Noise = train.Corruption{Kind: train.NoiseKind(k), Level: l}
		}
		if o.sparsity != "" {
			parts := strings.Split(o.sparsity, ":")
			if len(parts) < 2 {
				return nil, nil, usagef("-sparsity wants l1:WEIGHT or kl:WEIGHT[:TARGET]")
			}
			w, err := strconv.ParseFloat(parts[1], 64)
			if err != nil {
				return nil, nil, usagef("-sparsity weight %q", parts[1])
			}
			obj.Sparsity = train.Sparsity{Kind: train.SparsityKind(parts[0]), Weight: w}
			if len(parts) > 2 {
				if obj.Sparsity.Target, err = strconv.ParseFloat(parts[2], 64); err != nil {
					return nil, nil, usagef("-sparsity target %q", parts[2])
				}
			}
			if obj.Sparsity.Kind == train.KLSparsity {
				c.CodeActivation = layers.Sigmoid
			}
		}
		if o.supervised {
			if d.Labels == nil {
				return nil, nil, usagef("-supervised needs labels (-label or -labels)")
			}
			c.Classes = max(2, d.Classes())
		}
		m, err := ae.New(c)
		return usage(m, obj, err)
	case vae.Kind:
		c := vae.Config{Inputs: d.Cols, Hidden: hidden, Latent: o.latent, Activation: act, Scaling: scaling, Seed: o.seed,
			Likelihood: vae.Likelihood(o.likelihood)}
		if len(channels) > 0 {
			c.Image, c.Channels, c.Kernel = d.Image, channels, o.kernel
		}
		if c.Likelihood == "" && !image {
			// table columns are not probabilities; a variance learned per
			// column beat a fixed one on the open panel (bench/panel.sh with
			// TRAIN_FLAGS="-kind vae -likelihood ...": mean AUC 0.919 against
			// 0.905, and 0.954 against 0.930 on its typed sets)
			c.Likelihood = vae.GaussianLearned
		}
		if d.Encoding != nil && !d.Encoding.Plain() && c.Likelihood != vae.Bernoulli {
			// a table's likelihood: a category's levels categorical,
			// missing cells left out and charged
			c.Table, c.Categories = true, d.Encoding.CategorySpans()
		}
		obj := train.Variational{Beta: o.beta, FreeBits: o.freeBits}
		if o.warmup > 0 {
			obj.Schedule = train.BetaSchedule{Kind: train.BetaLinear, Steps: o.warmup}
		}
		m, err := vae.New(c)
		return usage(m, obj, err)
	case gan.Kind:
		c := gan.Config{Outputs: d.Cols, Noise: o.noiseDim, GenHidden: hidden, DiscHidden: hidden, Activation: act, Scaling: scaling, Seed: o.seed, Pack: o.pack}
		if len(channels) > 0 {
			c.Image, c.Channels, c.Kernel = d.Image, channels, o.kernel
		}
		if d.Encoding != nil {
			// categories as categories: a Gumbel-softmax in training, a
			// level drawn in sampling
			c.Categories = d.Encoding.CategorySpans()
		}
		obj := train.Adversarial{DiscSteps: o.discSteps}
		if image {
			c.GenOutput = layers.Sigmoid
			if c.Scaling == "" {
				c.Scaling = data.ScaleNone
			}
		}
		if o.cond {
			if d.Labels == nil {
				return nil, nil, usagef("-conditional needs labels (-label or -labels)")
			}
			c.Classes = max(2, d.Classes())
		}
		m, err := gan.New(c)
		return usage(m, obj, err)
	}
	return nil, nil, usagef("-kind %q: want ae, vae or gan", o.kind)
}

// legacy is what a checkpoint of an older quern says in its command-line
// strings.
type legacy struct {
	rec      runRecord
	settings train.Settings
}

// legacyRun reads the settings an older quern stored as command-line
// strings: the data, the split and the threshold, and the epochs, batch
// size and patience. Output and checkpoint paths in them are ignored.
func legacyRun(e *env, f *modelfile.File) (legacy, error) {
	var p struct {
		Training struct {
			Args []string `json:"args"`
		} `json:"training"`
	}
	ok, err := f.Section("provenance", &p)
	if err != nil {
		return legacy{}, err
	}
	if !ok || p.Training.Args == nil {
		return legacy{}, fmt.Errorf("the checkpoint holds no settings to resume with")
	}
	var o trainOpts
	fs := trainFlags(e, &o)
	if _, err := parse(e, fs, p.Training.Args, 0); err != nil {
		return legacy{}, fmt.Errorf("the checkpoint's settings: %w", err)
	}
	return legacy{
		rec:      runRecord{Data: o.data.spec(), Validation: o.val, SplitSeed: o.seed, FalseAlarm: o.falseAlarm, Threshold: o.method, Every: o.every},
		settings: train.Settings{Epochs: o.epochs, BatchSize: o.batch, Patience: o.patience},
	}, nil
}

// distinctPaths refuses two flags that name one file: no command writes
// over its own input.
func distinctPaths(paths map[string]string) error {
	names := make([]string, 0, len(paths))
	for n, p := range paths {
		if p != "" && p != "-" {
			names = append(names, n)
		}
	}
	for i, a := range names {
		for _, b := range names[i+1:] {
			if sameFile(paths[a], paths[b]) {
				return usagef("%s and %s name the same file %s", a, b, paths[a])
			}
		}
	}
	return nil
}

func sameFile(a, b string) bool {
	if filepath.Clean(a) == filepath.Clean(b) {
		return true
	}
	sa, errA := os.Stat(a)
	sb, errB := os.Stat(b)
	if errA == nil && errB == nil {
		return os.SameFile(sa, sb)
	}
	aa, errA := filepath.Abs(a)
	bb, errB := filepath.Abs(b)
	return errA == nil && errB == nil && aa == bb
}

// writable checks before any work that path's folder exists and takes
// files, so that a bad -out is found before training, not after.
func writable(path, flagName string) error {
	if st, err := os.Stat(path); err == nil && st.IsDir() {
		return fmt.Errorf("%s %s is a folder, not a file", flagName, path)
	}
	dir := filepath.Dir(path)
	st, err := os.Stat(dir)
	if err != nil {
		return fmt.Errorf("%s %s: the folder %s does not exist", flagName, path, dir)
	}
	if !st.IsDir() {
		return fmt.Errorf("%s %s: %s is not a folder", flagName, path, dir)
	}
	tmp, err := os.CreateTemp(dir, ".quern-write-check-*")
	if err != nil {
		return fmt.Errorf("%s %s: cannot write in %s", flagName, path, dir)
	}
	tmp.Close()
	os.Remove(tmp.Name())
	return nil
}

// reportFolder checks before any work that a -report path is a folder or
// can become one.
func reportFolder(dir string) error {
	if dir == "" {
		return nil
	}
	if st, err := os.Stat(dir); err == nil && !st.IsDir() {
		return fmt.Errorf("-report %s is a file, not a folder", dir)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("-report %s: cannot make the folder", dir)
	}
	return writable(filepath.Join(dir, "index.html"), "-report")
}

// writeCheckpoint saves atomically. For the crash tests only: with
// QUERN_TEST_CRASH_IN_SAVE=N the process dies on the Nth save after
// writing half of the temporary file, as a kill during a save would.
func writeCheckpoint(path string, f *modelfile.File, n int) error {
	if v := os.Getenv("QUERN_TEST_CRASH_IN_SAVE"); v != "" && v == strconv.Itoa(n) {
		tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".tmp-*")
		if err == nil {
			tmp.Write([]byte("QUERNMDL partial"))
			tmp.Close()
		}
		os.Exit(3)
	}
	return modelfile.Write(path, f)
}

// minRows is the fewest training rows quern trains on without a warning
// (common practice, no source: below a few dozen rows neither the
// scaler's statistics nor the threshold's quantile mean much).
const minRows = 50

// trainWarnings names what about the data and the model's shape makes a
// poor model likely: too few rows (fewer than minRows, or than the
// model's parameters), columns that never change, and a code as wide as
// the inputs (an autoencoder that can copy its input).
func trainWarnings(m train.Model, d *data.Dataset, val float64) []string {
	return append(dataWarnings(d), modelWarnings(m, d, val)...)
}

// dataWarnings are trainWarnings' lines about how the file was read:
// columns left out or doubted, sentinel values, rows skipped.
func dataWarnings(d *data.Dataset) []string {
	var out []string
	for _, s := range append(append(append([]string(nil), d.LeftOut...), d.Stray...), d.Sentinels()...) {
		out = append(out, "warning: "+s)
	}
	if n := len(d.Skipped); n > 0 {
		lines := make([]string, 0, 5)
		for _, l := range d.Skipped[:min(n, 5)] {
			lines = append(lines, strconv.Itoa(l))
		}
		more := ""
		if n > 5 {
			more = ", ..."
		}
		out = append(out, fmt.Sprintf("warning: %s left out: no observed cell (line %s%s)", plural(n, "training row"), strings.Join(lines, ", "), more))
	}
	return out
}

// modelWarnings are trainWarnings' lines about the model's shape for
// these rows.
func modelWarnings(m train.Model, d *data.Dataset, val float64) []string {
	var out []string
	rows := d.Rows - int(math.Round(val*float64(d.Rows)))
	params := 0
	if p, ok := m.(interface{ Params() []*layers.Param }); ok {
		for _, x := range p.Params() {
			params += x.Len()
		}
	}
	switch {
	case rows < minRows:
		out = append(out, fmt.Sprintf("warning: %s: too few to learn from (fewer than %d); expect scores that mean little", plural(rows, "training row"), minRows))
	case params > 0 && rows*weightsPerRow < params && d.Image == nil:
		advice := fmt.Sprintf("consider narrower -hidden and -latent (the autoencoder's default width keeps to about %d)", weightsPerRow)
		if m.Kind() == vae.Kind {
			advice = "consider narrower -hidden and -latent"
		}
		if m.Kind() == gan.Kind {
			// a GAN's generator learning the rows would copy them
			advice = "consider narrower -hidden, or check that samples are not copies of training rows"
		}
		out = append(out, fmt.Sprintf("warning: %d training rows for %d parameters (more than %d a row): the model can memorise the rows; %s", rows, params, weightsPerRow, advice))
	}
	if d.Image == nil && d.Rows > 1 {
		var constant []string
		for j := 0; j < d.Cols; j++ {
			first, same := d.X[j], true
			for r := 1; r < d.Rows && same; r++ {
				same = d.X[r*d.Cols+j] == first
			}
			if same {
				name := fmt.Sprintf("column %d", j+1)
				if j < len(d.Columns) && d.Columns[j] != "" {
					name = d.Columns[j]
				}
				constant = append(constant, name)
			}
		}
		if len(constant) > 0 {
			out = append(out, fmt.Sprintf("warning: %s never change%s: no information to learn (leave them out with -columns)", strings.Join(constant, ", "), map[bool]string{true: "s", false: ""}[len(constant) == 1]))
		}
	}
	if e, ok := m.(model.Encoder); ok && e.CodeWidth() >= d.Cols {
		out = append(out, fmt.Sprintf("warning: the code is %d wide for %d input columns: it can pass the input through unchanged, so reconstruction errors say little; give -latent below %d", e.CodeWidth(), d.Cols, d.Cols))
	}
	return out
}
