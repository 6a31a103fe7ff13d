package demo

import (
	"context"
	"encoding/csv"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"time"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/demo/fleet"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/report"
	"github.com/quernlab/quern/train"
)

// Config sets up a demo run. Zero fields: the folder quern-demo, the
// full fleet (24 pumps, 21 days of history, a hold-out week), seed 0.
type Config struct {
	// Out is the folder for the data, the model, the scores and the
	// report.
	Out string
	// Short runs a smaller fleet and fewer epochs.
	Short bool
	// Seed draws the fleet and the model.
	Seed uint64
	// Say receives each sentence of the demo's account (may be nil).
	Say func(string)
	// Callbacks watch the training.
	Callbacks train.Callbacks
	// Version names the program for the report page (may be empty).
	Version string
	// Scenario is "pumps" (the default: a pump fleet's telemetry) or
	// "payments" (card payments with text categories, identifiers, times
	// and empty cells; package payments).
	Scenario string
	// Phase, when not nil, is told the name of each phase as it starts
	// (generate, train, calibrate, score, write, report) and "" when the
	// last one ends.
	Phase func(name string)
}

// Run runs the whole job on an invented pump fleet: it writes the fleet's
// history and hold-out week as CSV, trains an autoencoder on the healthy
// history, calibrates its threshold on held-out healthy readings, scores
// the hold-out week, and writes the model, the scores and a report with
// figures, telling Say what it finds.
func Run(ctx context.Context, cfg Config) error {
	if cfg.Out == "" {
		cfg.Out = "quern-demo"
	}
	start := time.Now()
	if err := os.MkdirAll(cfg.Out, 0o755); err != nil {
		return err
	}
	switch cfg.Scenario {
	case "", "pumps":
	case "payments":
		return runPayments(ctx, cfg, func(format string, a ...any) {
			if cfg.Say != nil {
				cfg.Say(fmt.Sprintf(format, a...))
			}
		}, func(name string) {
			if cfg.Phase != nil {
				cfg.Phase(name)
			}
		})
	default:
		return fmt.Errorf("demo: unknown scenario %q (want pumps or payments)", cfg.Scenario)
	}
	fc := fleet.Config{Seed: cfg.Seed}
	epochs := 30
	if cfg.Short {
		fc = fleet.Config{Pumps: 12, HistoryDays: 14, HoldoutDays: 7, Seed: cfg.Seed}
		epochs = 8
	}
	say := func(format string, a ...any) {
		if cfg.Say != nil {
			cfg.Say(fmt.Sprintf(format, a...))
		}
	}
	phase := func(name string) {
		if cfg.Phase != nil {
			cfg.Phase(name)
		}
	}
	defer phase("")
	phase("generate")
	fl := fleet.Generate(fc)
	history, holdout := fleet.Dataset(fl.History), fleet.Dataset(fl.Holdout)
	faulty := 0
	for _, l := range holdout.Labels {
		faulty += l
	}
	say("Invented fleet: %d pumps, %d hourly readings of healthy history, %d readings in the hold-out week (%d from faulty pumps: bearing wear, cavitation, a stuck flow meter).",
		fc.Pumps+24*btoi(fc.Pumps == 0), history.Rows, holdout.Rows, faulty)
	if err := writeReadings(filepath.Join(cfg.Out, "history.csv"), fl.History); err != nil {
		return err
	}
	if err := writeReadings(filepath.Join(cfg.Out, "holdout.csv"), fl.Holdout); err != nil {
		return err
	}
	// healthy history: 80% to train, 20% held out to calibrate the threshold
	trainSet, calib, err := history.Split(0.2, rand.New(rand.NewPCG(cfg.Seed, stream.Split)))
	if err != nil {
		return err
	}
	trainSet.Labels, calib.Labels = nil, nil
	m, t, h, th, err := fitDetector(ctx, ae.Config{Inputs: 6, Hidden: []int{32, 16}, Latent: 3, Activation: layers.Tanh, Seed: cfg.Seed},
		train.Settings{Epochs: epochs, BatchSize: 64, Optimizer: train.Optimizer{Rate: 3e-3}, Callbacks: cfg.Callbacks}, trainSet, calib, phase)
	if err != nil {
		return err
	}
	say("Trained an autoencoder on %d healthy readings; threshold %.4g set on %d held-out healthy readings (expected false-alarm rate %.2f%%).",
		trainSet.Rows, th.Value, calib.Rows, 100*th.ExpectedFalseAlarm)
	prov := &modelfile.Provenance{DataFile: filepath.Join(cfg.Out, "history.csv"), DataFormat: string(data.FormatCSV), DataFingerprint: history.Fingerprint(), DataRows: history.Rows}
	modelPath := filepath.Join(cfg.Out, "pumps.qm")
	phase("write")
	f, err := t.File(prov)
	if err != nil {
		return err
	}
	if err := modelfile.Write(modelPath, f); err != nil {
		return err
	}
	phase("score")
	scores, err := m.Score(holdout.X, holdout.Rows, 2)
	if err != nil {
		return err
	}
	values := make([]float64, len(scores))
	positive := make([]bool, len(scores))
	for i, s := range scores {
		values[i], positive[i] = s.Value, holdout.Labels[i] == 1
	}
	prec, rec, err := anomaly.PrecisionRecall(values, positive, th.Value)
	if err != nil {
		return err
	}
	auc, err := anomaly.ROCAUC(values, positive)
	if err != nil {
		return err
	}
	if err := writeScores(filepath.Join(cfg.Out, "holdout-scores.csv"), fl.Holdout, scores); err != nil {
		return err
	}
	byKind := map[string][2]int{}
	for i, r := range fl.Holdout {
		if r.Fault != fleet.Healthy {
			c := byKind[r.Fault]
			c[1]++
			if scores[i].Anomaly {
				c[0]++
			}
			byKind[r.Fault] = c
		}
	}
	say("Hold-out week: precision %.3f, recall %.3f at the threshold; ROC AUC %.3f.", prec, rec, auc)
	faults := report.Table{Caption: "Faulty readings flagged in the hold-out week, by fault", Header: []string{"fault", "flagged", "faulty readings", "share flagged"}}
	for _, k := range []string{fleet.BearingWear, fleet.Cavitation, fleet.StuckSensor} {
		if c, ok := byKind[k]; ok {
			say("  %-13s %d of %d faulty readings flagged", k, c[0], c[1])
			faults.Rows = append(faults.Rows, []string{k, strconv.Itoa(c[0]), strconv.Itoa(c[1]), fmt.Sprintf("%.1f%%", 100*float64(c[0])/float64(max(c[1], 1)))})
		}
	}
	falseAlarms, healthy := 0, 0
	for i, r := range fl.Holdout {
		if r.Fault == fleet.Healthy {
			healthy++
			if scores[i].Anomaly {
				falseAlarms++
			}
		}
	}
	faults.Rows = append(faults.Rows, []string{"healthy (false alarms)", strconv.Itoa(falseAlarms), strconv.Itoa(healthy), fmt.Sprintf("%.2f%%", 100*float64(falseAlarms)/float64(max(healthy, 1)))})
	say("%s", anomaly.Caution)
	phase("report")
	rdir := filepath.Join(cfg.Out, "report")
	if err := os.MkdirAll(rdir, 0o755); err != nil {
		return err
	}
	tl, vl := h.Loss(len(h.Epochs))
	pg := report.Page{Title: "quern demo: pump fleet anomaly detection", Caution: anomaly.Caution,
		Generated: time.Now().UTC().Format("2006-01-02 15:04 UTC"), Version: cfg.Version,
		Tables: []report.Table{faults},
		Summary: []report.Setting{
			{Name: "training rows (healthy)", Value: strconv.Itoa(trainSet.Rows)},
			{Name: "calibration rows (healthy)", Value: strconv.Itoa(calib.Rows)},
			{Name: "final training loss", Value: fmt.Sprintf("%.5g", tl)},
			{Name: "final validation loss", Value: fmt.Sprintf("%.5g", vl)},
			{Name: "threshold", Value: fmt.Sprintf("%.4g (quantile for a 1%% false-alarm rate; expected %.2f%%)", th.Value, 100*th.ExpectedFalseAlarm)},
			{Name: "hold-out precision / recall", Value: fmt.Sprintf("%.3f / %.3f", prec, rec)},
			{Name: "hold-out ROC AUC", Value: fmt.Sprintf("%.3f", auc)},
		},
		Paragraphs: []string{
			fmt.Sprintf("An autoencoder learned how %d invented pumps behave when healthy, from %d hourly readings of vibration, bearing temperature, flow, motor current and suction and discharge pressure.", fc.Pumps+24*btoi(fc.Pumps == 0), trainSet.Rows),
			fmt.Sprintf("On the hold-out week it flagged readings with precision %.3f and recall %.3f against the injected faults (ROC AUC %.3f).", prec, rec, auc),
		},
		Settings: []report.Setting{{Name: "seed", Value: strconv.FormatUint(cfg.Seed, 10)}, {Name: "epochs", Value: strconv.Itoa(epochs)}, {Name: "architecture", Value: "6-32-16-3-16-32-6, tanh"},
			{Name: "threshold", Value: fmt.Sprintf("%.4g (quantile, target 1%%, expected %.2f%%)", th.Value, 100*th.ExpectedFalseAlarm)}, {Name: "model file", Value: modelPath}}}
	if err := report.LossCurves(filepath.Join(rdir, "curves.png"), h, report.CurveOptions{}); err != nil {
		return err
	}
	pg.Figures = append(pg.Figures, report.Figure{File: "curves.png", Caption: "Reconstruction error per epoch: training readings, solid; held-out healthy readings, dashed; the dotted line marks the best epoch."})
	if err := report.ScoreHistogram(filepath.Join(rdir, "scores.png"), values, th.Value, positive, m.ScoreName()); err != nil {
		return err
	}
	pg.Figures = append(pg.Figures, report.Figure{File: "scores.png", Caption: "Hold-out week scores, healthy and faulty readings (each group scaled to the same area), with the threshold."})
	codes, err := m.Encode(holdout.X, holdout.Rows)
	if err != nil {
		return err
	}
	if err := report.LatentMap(filepath.Join(rdir, "latent.png"), codes, holdout.Rows, 3, holdout.Labels, []string{"healthy", "faulty"}); err != nil {
		return err
	}
	pg.Figures = append(pg.Figures, report.Figure{File: "latent.png", Caption: "Codes of the hold-out week: on top, their projection on the first two principal components of the three code dimensions; below, each pair of dimensions; healthy and faulty readings told apart by colour and marker."})
	pg.RunTime = roundDuration(time.Since(start)).String()
	if err := pg.Write(rdir); err != nil {
		return err
	}
	say("Wrote %s (model), %s, and the report %s in %s.", modelPath, filepath.Join(cfg.Out, "holdout-scores.csv"), filepath.Join(rdir, "index.html"), roundDuration(time.Since(start)))
	return nil
}

// fitDetector trains an autoencoder of c with s on the training rows,
// stopping by the calibration rows, fits its score profile on the
// training rows and sets its threshold for a 1% false-alarm rate on the
// calibration rows, telling phase as it goes (train, calibrate).
func fitDetector(ctx context.Context, c ae.Config, s train.Settings, trainSet, calib *data.Dataset, phase func(string)) (*ae.Model, *train.Trainer, *train.History, anomaly.Threshold, error) {
	var th anomaly.Threshold
	phase("train")
	m, err := ae.New(c)
	if err != nil {
		return nil, nil, nil, th, err
	}
	t, err := train.New(m, s)
	if err != nil {
		return nil, nil, nil, th, err
	}
	h, err := t.Run(ctx, trainSet, calib)
	if err != nil {
		return nil, nil, nil, th, err
	}
	phase("calibrate")
	if err := m.FitProfile(trainSet.X, trainSet.Rows); err != nil {
		return nil, nil, nil, th, err
	}
	th, err = m.Calibrate(calib.X, calib.Rows, anomaly.Config{FalseAlarm: 0.01})
	return m, t, h, th, err
}

func btoi(b bool) int {
	if b {
		return 1
	}
	return 0
}

func writeReadings(path string, rs []fleet.Reading) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	w := csv.NewWriter(f)
	w.Write(append([]string{"pump", "hour"}, append(fleet.Columns, "fault")...))
	for _, r := range rs {
		rec := []string{strconv.Itoa(r.Pump), strconv.Itoa(r.Hour)}
		for _, v := range r.X {
			rec = append(rec, strconv.FormatFloat(v, 'f', 3, 64))
		}
		rec = append(rec, r.Fault)
		w.Write(rec)
	}
	w.Flush()
	if err := w.Error(); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}

func writeScores(path string, rs []fleet.Reading, scores []ae.Score) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	w := csv.NewWriter(f)
	w.Write([]string{"row", "pump", "hour", "score", "threshold", "anomaly", "feature1", "feature2", "injected_fault"})
	for i, s := range scores {
		w.Write([]string{strconv.Itoa(i + 1), strconv.Itoa(rs[i].Pump), strconv.Itoa(rs[i].Hour), strconv.FormatFloat(s.Value, 'g', 6, 64),
			strconv.FormatFloat(s.Threshold, 'g', 6, 64), strconv.FormatBool(s.Anomaly), s.Top[0].Name, s.Top[1].Name, rs[i].Fault})
	}
	w.Flush()
	if err := w.Error(); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}

// roundDuration keeps about two significant digits: 0.38s, 4.2s, 37s.
func roundDuration(d time.Duration) time.Duration {
	switch {
	case d < 10*time.Millisecond:
		return d.Round(time.Millisecond)
	case d < time.Second:
		return d.Round(10 * time.Millisecond)
	case d < 10*time.Second:
		return d.Round(100 * time.Millisecond)
	}
	return d.Round(time.Second)
}
