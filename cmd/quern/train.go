package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"math/rand/v2"
	"os"
	"os/signal"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/vae"
)

// calibrator is a model whose anomaly threshold is set on the validation
// rows after training (ae: reconstruction error; vae: negative ELBO).
type calibrator interface {
	Calibrate(x []float32, rows int, c anomaly.Config) (anomaly.Threshold, error)
}

// trainable is what ae, vae and gan models share for the command.
type trainable interface {
	Train(ctx context.Context, tr, va *data.Dataset, cfg train.Config) (*train.History, error)
	File(prov *modelfile.Provenance, h *train.History) (*modelfile.File, error)
}

type trainOpts struct {
	kind       string
	data       dataFlags
	out        string
	hidden     string
	latent     int
	epochs     int
	batch      int
	rate       float64
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
	checkpoint string
	every      int
	resume     string
	report     string
	quiet      bool
}

func trainFlags(e *env, o *trainOpts) *flag.FlagSet {
	fs := newFlags(e, "train", "-kind ae|vae|gan -data FILE -out MODEL [flags]")
	fs.StringVar(&o.kind, "kind", "ae", "model kind: ae (autoencoder), vae (variational autoencoder) or gan")
	o.data.register(fs, true)
	fs.StringVar(&o.out, "out", "", "model file to write (required)")
	fs.StringVar(&o.hidden, "hidden", "", "comma-separated hidden layer widths (default: the model's)")
	fs.IntVar(&o.latent, "latent", 0, "code / latent width (default: the model's)")
	fs.IntVar(&o.epochs, "epochs", 20, "training epochs")
	fs.IntVar(&o.batch, "batch", 64, "mini-batch size")
	fs.Float64Var(&o.rate, "rate", 0, "learning rate (default: the model's)")
	fs.Uint64Var(&o.seed, "seed", 1, "random seed: same seed, same data, same model")
	fs.Float64Var(&o.val, "val", 0.1, "fraction of rows held out for validation (and, for ae, threshold calibration)")
	fs.IntVar(&o.patience, "patience", 0, "stop after this many epochs without validation improvement (0: never)")
	fs.StringVar(&o.scaling, "scaling", "", "column scaling: standard, minmax or none (default: by kind and data)")
	fs.StringVar(&o.activation, "activation", "", "hidden activation: relu, leaky_relu, elu, tanh, sigmoid, softplus")
	fs.StringVar(&o.denoise, "denoise", "", "ae: corrupt inputs while training, KIND:LEVEL with KIND gaussian, masking or salt_pepper")
	fs.StringVar(&o.sparsity, "sparsity", "", "ae: sparsity penalty l1:WEIGHT or kl:WEIGHT[:TARGET]")
	fs.StringVar(&o.loss, "loss", "", "ae: reconstruction loss mse or bce (default: bce for images, else mse)")
	fs.BoolVar(&o.supervised, "supervised", false, "ae: add a classification head trained on the labels")
	fs.StringVar(&o.likelihood, "likelihood", "", "vae: bernoulli, gaussian, gaussian_learned or gaussian_shared")
	fs.Float64Var(&o.beta, "beta", 0, "vae: weight of the KL term (default 1)")
	fs.IntVar(&o.warmup, "warmup", 0, "vae: raise beta linearly over this many steps (KL annealing)")
	fs.Float64Var(&o.freeBits, "free-bits", 0, "vae: minimum KL per latent dimension, in nats")
	fs.IntVar(&o.noiseDim, "noise-dim", 0, "gan: noise dimension (default 16)")
	fs.IntVar(&o.discSteps, "disc-steps", 0, "gan: discriminator updates per generator update (default 1)")
	fs.IntVar(&o.pack, "pack", 0, "gan: samples the discriminator judges together (default 1)")
	fs.BoolVar(&o.cond, "conditional", false, "gan: condition both networks on the labels")
	fs.Float64Var(&o.falseAlarm, "false-alarm", 0.01, "ae, vae: target false-alarm rate of the threshold")
	fs.StringVar(&o.method, "threshold", "quantile", "ae, vae: threshold method: quantile (for -false-alarm) or max")
	fs.StringVar(&o.checkpoint, "checkpoint", "", "checkpoint file (default: MODEL.ckpt when -every > 0)")
	fs.IntVar(&o.every, "every", 0, "write a checkpoint every N epochs")
	fs.StringVar(&o.resume, "resume", "", "resume from a checkpoint (uses the settings it was started with)")
	fs.StringVar(&o.report, "report", "", "folder for the PNG figures and HTML report")
	fs.BoolVar(&o.quiet, "quiet", false, "no progress output")
	return fs
}

func cmdTrain(e *env, args []string) error {
	var o trainOpts
	fs := trainFlags(e, &o)
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	var ckpt *modelfile.File
	if o.resume != "" {
		allowed := map[string]bool{"resume": true, "quiet": true, "report": true, "out": true}
		var bad []string
		fs.Visit(func(f *flag.Flag) {
			if !allowed[f.Name] {
				bad = append(bad, "-"+f.Name)
			}
		})
		if len(bad) > 0 {
			return usagef("%s cannot be changed when resuming (the checkpoint keeps the original settings)", strings.Join(bad, ", "))
		}
		f, err := modelfile.Read(o.resume, 0)
		if err != nil {
			return err
		}
		ckpt = f
		stored, err := storedArgs(f)
		if err != nil {
			return err
		}
		keep := o
		o = trainOpts{}
		fs2 := trainFlags(e, &o)
		if _, err := parse(e, fs2, stored, 0); err != nil {
			return fmt.Errorf("checkpoint settings: %w", err)
		}
		o.resume, o.quiet = keep.resume, keep.quiet
		if keep.report != "" {
			o.report = keep.report
		}
		if keep.out != "" {
			o.out = keep.out
		}
	}
	if o.out == "" {
		return usagef("-out is required")
	}
	if o.kind != ae.Kind && o.kind != vae.Kind && o.kind != gan.Kind {
		return usagef("-kind must be ae, vae or gan, not %q", o.kind)
	}
	if o.epochs <= 0 || o.batch <= 0 || o.val < 0 || o.val >= 1 || o.every < 0 || o.patience < 0 {
		return usagef("epochs and batch must be positive, -val in [0, 1), -every and -patience not negative")
	}
	if o.every > 0 && o.checkpoint == "" {
		o.checkpoint = o.out + ".ckpt"
	}
	full, format, err := o.data.load()
	if err != nil {
		return err
	}
	prov := &modelfile.Provenance{DataFile: o.data.path, DataFingerprint: full.Fingerprint(), DataRows: full.Rows,
		Training: map[string]any{"args": o.args(), "format": string(format)}}
	if ckpt != nil {
		if err := checkFingerprint(ckpt, prov.DataFingerprint); err != nil {
			return err
		}
	}
	trainSet, valSet := full, (*data.Dataset)(nil)
	if o.val > 0 {
		trainSet, valSet, err = full.Split(o.val, rand.New(rand.NewPCG(o.seed, 7)))
		if err != nil {
			return err
		}
	}
	var model trainable
	var start *train.History
	if ckpt != nil {
		model, start, err = fromCheckpoint(ckpt)
	} else {
		model, err = o.build(full)
	}
	if err != nil {
		return err
	}
	pr := newProgress(e.stderr, o.quiet)
	tc := train.Config{Epochs: o.epochs, BatchSize: o.batch, Patience: o.patience, Start: start, OnStep: pr.step}
	saves := 0
	tc.OnEpoch = func(p train.Progress, h *train.History) error {
		pr.epoch(p)
		if o.every > 0 && p.Epoch%o.every == 0 {
			f, err := model.File(prov, h)
			if err != nil {
				return err
			}
			saves++
			if err := writeCheckpoint(o.checkpoint, f, saves); err != nil {
				return fmt.Errorf("checkpoint: %w", err)
			}
		}
		return nil
	}
	if o.patience > 0 && valSet == nil {
		return usagef("-patience needs a validation split (-val > 0)")
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	h, err := model.Train(ctx, trainSet, valSet, tc)
	pr.done()
	if err != nil {
		if errors.Is(err, context.Canceled) {
			return fmt.Errorf("interrupted; the last checkpoint (if any) can be resumed with -resume")
		}
		return err
	}
	if m, ok := model.(calibrator); ok && valSet != nil {
		th, err := m.Calibrate(valSet.X, valSet.Rows, anomaly.Config{Method: anomaly.Method(o.method), FalseAlarm: o.falseAlarm})
		if err != nil && o.method == string(anomaly.Quantile) && strings.Contains(err.Error(), "needs at least") {
			if !o.quiet {
				fmt.Fprintf(e.stderr, "%v; using the largest validation score instead\n", err)
			}
			th, err = m.Calibrate(valSet.X, valSet.Rows, anomaly.Config{Method: anomaly.Max})
		}
		if err != nil {
			fmt.Fprintf(e.stderr, "no threshold set: %v\n", err)
		} else if !o.quiet {
			fmt.Fprintf(e.stderr, "threshold %.6g (%s), expected false-alarm rate %.2f%% on data like the validation rows\n", th.Value, th.Method, 100*th.ExpectedFalseAlarm)
		}
	}
	tl, vl := h.Loss(len(h.Epochs))
	prov.Training["epochs_run"] = len(h.Epochs)
	prov.Training["final_train_loss"] = tl
	if valSet != nil {
		prov.Training["final_validation_loss"] = vl
		prov.Training["validation_rows"] = valSet.Rows
	}
	prov.Training["best_epoch"] = h.BestEpoch
	prov.Training["stopped_early"] = h.StoppedEarly
	f, err := model.File(prov, nil)
	if err != nil {
		return err
	}
	if err := modelfile.Write(o.out, f); err != nil {
		return err
	}
	if !o.quiet {
		fmt.Fprintf(e.stderr, "wrote %s: %s model, %d epochs, final training loss %.6g", o.out, o.kind, len(h.Epochs), tl)
		if valSet != nil {
			fmt.Fprintf(e.stderr, ", validation loss %.6g (best epoch %d)", vl, h.BestEpoch)
		}
		fmt.Fprintln(e.stderr)
	}
	if o.report != "" {
		if err := writeTrainReport(o, model, h, full, valSet); err != nil {
			return err
		}
		if !o.quiet {
			fmt.Fprintf(e.stderr, "report: %s\n", filepath.Join(o.report, "index.html"))
		}
	}
	return nil
}

// args are the settings stored in checkpoints and model files, enough to
// repeat the run.
func (o *trainOpts) args() []string {
	a := []string{"-kind=" + o.kind}
	a = append(a, o.data.args()...)
	a = append(a, "-out="+o.out, "-epochs="+strconv.Itoa(o.epochs), "-batch="+strconv.Itoa(o.batch),
		"-seed="+strconv.FormatUint(o.seed, 10), "-val="+strconv.FormatFloat(o.val, 'g', -1, 64))
	add := func(k, v string, set bool) {
		if set {
			a = append(a, "-"+k+"="+v)
		}
	}
	ff := func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
	add("hidden", o.hidden, o.hidden != "")
	add("latent", strconv.Itoa(o.latent), o.latent != 0)
	add("rate", ff(o.rate), o.rate != 0)
	add("patience", strconv.Itoa(o.patience), o.patience != 0)
	add("scaling", o.scaling, o.scaling != "")
	add("activation", o.activation, o.activation != "")
	add("denoise", o.denoise, o.denoise != "")
	add("sparsity", o.sparsity, o.sparsity != "")
	add("loss", o.loss, o.loss != "")
	add("supervised", "true", o.supervised)
	add("likelihood", o.likelihood, o.likelihood != "")
	add("beta", ff(o.beta), o.beta != 0)
	add("warmup", strconv.Itoa(o.warmup), o.warmup != 0)
	add("free-bits", ff(o.freeBits), o.freeBits != 0)
	add("noise-dim", strconv.Itoa(o.noiseDim), o.noiseDim != 0)
	add("disc-steps", strconv.Itoa(o.discSteps), o.discSteps != 0)
	add("pack", strconv.Itoa(o.pack), o.pack != 0)
	add("conditional", "true", o.cond)
	add("false-alarm", ff(o.falseAlarm), true)
	add("threshold", o.method, true)
	add("checkpoint", o.checkpoint, o.checkpoint != "")
	add("every", strconv.Itoa(o.every), o.every != 0)
	return a
}

func (o *trainOpts) build(d *data.Dataset) (trainable, error) {
	hidden, err := parseInts(o.hidden, "hidden")
	if err != nil {
		return nil, err
	}
	if o.hidden == "" {
		hidden = nil
	}
	var act layers.Activation
	if o.activation != "" {
		if act, err = layers.ParseActivation(o.activation); err != nil {
			return nil, usagef("-activation: %v", err)
		}
	}
	image := d.Image != nil
	scaling := data.ScaleKind(o.scaling)
	switch o.kind {
	case ae.Kind:
		c := ae.Config{Inputs: d.Cols, Hidden: hidden, Latent: o.latent, Activation: act, Rate: o.rate, Scaling: scaling, Seed: o.seed, Loss: ae.Reconstruction(o.loss)}
		if image {
			if c.Loss == "" {
				c.Loss = ae.BCE
			}
			if c.Scaling == "" {
				c.Scaling = data.ScaleNone
			}
		}
		if o.denoise != "" {
			k, lv, ok := strings.Cut(o.denoise, ":")
			l, err := strconv.ParseFloat(lv, 64)
			if !ok || err != nil {
				return nil, usagef("-denoise wants KIND:LEVEL, got %q", o.denoise)
			}
			c.Noise = ae.Corruption{Kind: ae.NoiseKind(k), Level: l}
		}
		if o.sparsity != "" {
			parts := strings.Split(o.sparsity, ":")
			if len(parts) < 2 {
				return nil, usagef("-sparsity wants l1:WEIGHT or kl:WEIGHT[:TARGET]")
			}
			w, err := strconv.ParseFloat(parts[1], 64)
			if err != nil {
				return nil, usagef("-sparsity weight %q", parts[1])
			}
			c.Sparsity = ae.Sparsity{Kind: ae.SparsityKind(parts[0]), Weight: w}
			if len(parts) > 2 {
				if c.Sparsity.Target, err = strconv.ParseFloat(parts[2], 64); err != nil {
					return nil, usagef("-sparsity target %q", parts[2])
				}
			}
			if c.Sparsity.Kind == ae.KLSparsity {
				c.CodeActivation = layers.Sigmoid
			}
		}
		if o.supervised {
			if d.Labels == nil {
				return nil, usagef("-supervised needs labels (-label or -labels)")
			}
			c.Classes = max(2, d.Classes())
		}
		m, err := ae.New(c)
		if err != nil {
			return nil, usageError{err.Error()}
		}
		return m, nil
	case vae.Kind:
		c := vae.Config{Inputs: d.Cols, Hidden: hidden, Latent: o.latent, Activation: act, Rate: o.rate, Scaling: scaling, Seed: o.seed,
			Likelihood: vae.Likelihood(o.likelihood), Beta: o.beta, FreeBits: o.freeBits}
		if o.warmup > 0 {
			c.Schedule = vae.BetaSchedule{Kind: vae.Linear, Steps: o.warmup}
		}
		m, err := vae.New(c)
		if err != nil {
			return nil, usageError{err.Error()}
		}
		return m, nil
	default:
		c := gan.Config{Outputs: d.Cols, Noise: o.noiseDim, GenHidden: hidden, DiscHidden: hidden, Activation: act, Scaling: scaling, Seed: o.seed,
			GenRate: o.rate, DiscRate: o.rate, DiscSteps: o.discSteps, Pack: o.pack}
		if image {
			c.GenOutput = layers.Sigmoid
			if c.Scaling == "" {
				c.Scaling = data.ScaleNone
			}
		}
		if o.cond {
			if d.Labels == nil {
				return nil, usagef("-conditional needs labels (-label or -labels)")
			}
			c.Classes = max(2, d.Classes())
		}
		m, err := gan.New(c)
		if err != nil {
			return nil, usageError{err.Error()}
		}
		return m, nil
	}
}

func storedArgs(f *modelfile.File) ([]string, error) {
	prov, err := provenanceOf(f)
	if err != nil {
		return nil, err
	}
	if prov == nil || prov.Training == nil {
		return nil, fmt.Errorf("%s holds no training settings to resume with", f.Kind)
	}
	raw, ok := prov.Training["args"].([]any)
	if !ok {
		return nil, fmt.Errorf("checkpoint holds no training settings")
	}
	var args []string
	for _, v := range raw {
		s, ok := v.(string)
		if !ok {
			return nil, fmt.Errorf("checkpoint settings are malformed")
		}
		args = append(args, s)
	}
	return args, nil
}

func checkFingerprint(f *modelfile.File, fp string) error {
	prov, err := provenanceOf(f)
	if err != nil {
		return err
	}
	if prov != nil && prov.DataFingerprint != "" && prov.DataFingerprint != fp {
		return fmt.Errorf("the data differs from the data the checkpoint was trained on (fingerprint %.12s..., now %.12s...)", prov.DataFingerprint, fp)
	}
	return nil
}

func fromCheckpoint(f *modelfile.File) (trainable, *train.History, error) {
	var h *train.History
	var err error
	var m trainable
	switch f.Kind {
	case ae.Kind:
		var x *ae.Model
		x, h, _, err = ae.FromFile(f)
		m = x
	case vae.Kind:
		var x *vae.Model
		x, h, _, err = vae.FromFile(f)
		m = x
	case gan.Kind:
		var x *gan.Model
		x, h, _, err = gan.FromFile(f)
		m = x
	default:
		return nil, nil, fmt.Errorf("unknown model kind %q", f.Kind)
	}
	if err != nil {
		return nil, nil, err
	}
	if h == nil {
		return nil, nil, fmt.Errorf("this is a model file, not a checkpoint: it has no training state")
	}
	return m, h, nil
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
