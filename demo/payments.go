package demo

import (
	"context"
	"encoding/csv"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/demo/payments"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/report"
	"github.com/quernlab/quern/train"
)

// runPayments is Run for the payments scenario: a table of card payments
// with text categories, a yes/no column, identifiers, times and empty
// cells, read by type; the identifier and time columns are left out of
// the model and the hold-out month's fraud patterns scored and explained
// per column.
func runPayments(ctx context.Context, cfg Config, say func(string, ...any), phase func(string)) error {
	start := time.Now()
	pc := payments.Config{Seed: cfg.Seed}
	epochs := 60
	if cfg.Short {
		pc = payments.Config{History: 6000, Holdout: 2000, Seed: cfg.Seed}
		epochs = 15
	}
	phase("generate")
	tb := payments.Generate(pc)
	histPath, holdPath := filepath.Join(cfg.Out, "payments.csv"), filepath.Join(cfg.Out, "holdout.csv")
	if err := writePayments(histPath, tb.History, false); err != nil {
		return err
	}
	if err := writePayments(holdPath, tb.Holdout, true); err != nil {
		return err
	}
	fraud := 0
	for _, p := range tb.Holdout {
		if p.Pattern != payments.Normal {
			fraud++
		}
	}
	say("Invented card payments: %d of history, %d in the hold-out month (%d of them fraud: card testing, account takeover, cloned cards, channel mismatches); columns %s.",
		len(tb.History), len(tb.Holdout), fraud, strings.Join(payments.Columns, ", "))
	history, err := readCSV(histPath, data.CSVConfig{Typed: true})
	if err != nil {
		return err
	}
	for _, s := range history.LeftOut {
		say("Read by type: %s.", s)
	}
	say("Features: %s.", history.Encoding.Describe())
	trainSet, calib, err := history.Split(0.2, rand.New(rand.NewPCG(cfg.Seed, stream.Split)))
	if err != nil {
		return err
	}
	m, t, h, th, err := fitDetector(ctx, ae.Config{Inputs: history.Cols, Hidden: []int{32}, Latent: 6, Seed: cfg.Seed, Categories: history.Encoding.CategorySpans()},
		train.Settings{Epochs: epochs, Patience: 8, BatchSize: 128, Optimizer: train.Optimizer{Rate: 3e-3}, Callbacks: cfg.Callbacks}, trainSet, calib, phase)
	if err != nil {
		return err
	}
	say("Trained an autoencoder on %d payments; threshold %.4g set on %d held-out payments (expected false-alarm rate %.2f%%, below %.2f%% with %.0f%% confidence).",
		trainSet.Rows, th.Value, calib.Rows, 100*th.ExpectedFalseAlarm, 100*th.FalseAlarmBound, 100*anomaly.BoundConfidence)
	phase("write")
	modelPath := filepath.Join(cfg.Out, "payments.qm")
	prov := &modelfile.Provenance{DataFile: histPath, DataFormat: string(data.FormatCSV), DataFingerprint: history.Fingerprint(), DataRows: history.Rows}
	f, err := t.File(prov)
	if err != nil {
		return err
	}
	if err := modelfile.Write(modelPath, f); err != nil {
		return err
	}
	phase("score")
	// the hold-out month read by the model's encoding, by column name;
	// the identifier and the injected pattern kept beside each row
	hold, err := readCSV(holdPath, data.CSVConfig{Encoding: m.Encoding, Keep: []string{"payment_id", payments.Label}})
	if err != nil {
		return err
	}
	scores, err := m.Score(hold.X, hold.Rows, 3)
	if err != nil {
		return err
	}
	for _, n := range hold.Notes {
		scores[n.Row].Read = n.Text
	}
	values := make([]float64, len(scores))
	positive := make([]bool, len(scores))
	pattern := make([]string, len(scores))
	for i, s := range scores {
		pattern[i] = hold.Kept[i*2+1]
		values[i], positive[i] = s.Value, pattern[i] != payments.Normal
	}
	prec, rec, err := anomaly.PrecisionRecall(values, positive, th.Value)
	if err != nil {
		return err
	}
	auc, err := anomaly.ROCAUC(values, positive)
	if err != nil {
		return err
	}
	if err := writePaymentScores(filepath.Join(cfg.Out, "holdout-scores.csv"), hold.Kept, scores); err != nil {
		return err
	}
	say("Hold-out month: precision %.3f, recall %.3f at the threshold; ROC AUC %.3f.", prec, rec, auc)
	table := report.Table{Caption: "Payments flagged in the hold-out month, by injected pattern", Header: []string{"pattern", "flagged", "payments", "share flagged", "an example's top column: value against what the model expected"}}
	for _, pt := range append(append([]string(nil), payments.Patterns...), payments.Normal) {
		flagged, n, example := 0, 0, ""
		for i, s := range scores {
			if pattern[i] != pt {
				continue
			}
			n++
			if s.Anomaly {
				flagged++
				if example == "" && len(s.Top) > 0 {
					example = explainTop(tb.Holdout[i], s.Top[0])
				}
			}
		}
		name := pt
		if pt == payments.Normal {
			name = "normal (false alarms)"
		}
		say("  %-22s %d of %d flagged%s", name, flagged, n, map[bool]string{true: "; e.g. " + example, false: ""}[example != "" && pt != payments.Normal])
		table.Rows = append(table.Rows, []string{name, strconv.Itoa(flagged), strconv.Itoa(n), fmt.Sprintf("%.1f%%", 100*float64(flagged)/float64(max(n, 1))), example})
	}
	say("%s", anomaly.Caution)
	phase("report")
	rdir := filepath.Join(cfg.Out, "report")
	if err := os.MkdirAll(rdir, 0o755); err != nil {
		return err
	}
	tl, vl := h.Loss(len(h.Epochs))
	pg := report.Page{Title: "quern demo: card payments, fraud patterns", Caution: anomaly.Caution,
		Generated: time.Now().UTC().Format("2006-01-02 15:04 UTC"), Version: cfg.Version,
		Tables: []report.Table{table},
		Summary: []report.Setting{
			{Name: "training payments", Value: strconv.Itoa(trainSet.Rows)},
			{Name: "calibration payments", Value: strconv.Itoa(calib.Rows)},
			{Name: "features", Value: history.Encoding.Describe()},
			{Name: "left out", Value: strings.Join(history.LeftOut, "; ")},
			{Name: "final training loss", Value: fmt.Sprintf("%.5g", tl)},
			{Name: "final validation loss", Value: fmt.Sprintf("%.5g", vl)},
			{Name: "threshold", Value: fmt.Sprintf("%.4g (expected false-alarm rate %.2f%%, below %.2f%% with %.0f%% confidence)", th.Value, 100*th.ExpectedFalseAlarm, 100*th.FalseAlarmBound, 100*anomaly.BoundConfidence)},
			{Name: "hold-out precision / recall", Value: fmt.Sprintf("%.3f / %.3f", prec, rec)},
			{Name: "hold-out ROC AUC", Value: fmt.Sprintf("%.3f", auc)},
		},
		Paragraphs: []string{
			fmt.Sprintf("An autoencoder learned what %d invented card payments look like: the merchant category, channel and country as categories (their reconstruction a softmax over the levels), the amount, and whether the card was present; empty cells filled and marked.", trainSet.Rows),
			fmt.Sprintf("On the hold-out month it flagged payments with precision %.3f and recall %.3f against the injected fraud (ROC AUC %.3f). A country never seen in training is reported in the score file's status column and counts against the row.", prec, rec, auc),
		},
		Settings: []report.Setting{{Name: "seed", Value: strconv.FormatUint(cfg.Seed, 10)}, {Name: "epochs", Value: fmt.Sprintf("at most %d, stopping after 8 without improvement", epochs)},
			{Name: "architecture", Value: fmt.Sprintf("%d-32-6-32-%d, relu", history.Cols, history.Cols)}, {Name: "model file", Value: modelPath}}}
	if err := report.LossCurves(filepath.Join(rdir, "curves.png"), h, report.CurveOptions{}); err != nil {
		return err
	}
	pg.Figures = append(pg.Figures, report.Figure{File: "curves.png", Caption: "Reconstruction loss per epoch: training payments, solid; held-out payments, dashed; the dotted line marks the best epoch."})
	if err := report.ScoreHistogram(filepath.Join(rdir, "scores.png"), values, th.Value, positive, m.ScoreName()); err != nil {
		return err
	}
	pg.Figures = append(pg.Figures, report.Figure{File: "scores.png", Caption: "Hold-out month scores, normal payments and fraud (each group scaled to the same area), with the threshold."})
	pg.RunTime = roundDuration(time.Since(start)).String()
	if err := pg.Write(rdir); err != nil {
		return err
	}
	say("Wrote %s (model), %s, and the report %s in %s.", modelPath, filepath.Join(cfg.Out, "holdout-scores.csv"), filepath.Join(rdir, "index.html"), roundDuration(time.Since(start)))
	return nil
}

// explainTop says a flagged payment's top column: its value against what
// the model expected.
func explainTop(p payments.Payment, f anomaly.Feature) string {
	value := map[string]string{"merchant_category": p.Merchant, "channel": p.Channel, "country": p.Country,
		"amount_eur": strconv.FormatFloat(p.Amount, 'f', 2, 64), "card_present": p.CardPresent}[f.Name]
	if value == "" || value == "NaN" {
		value = "empty"
	}
	s := fmt.Sprintf("%s %s", f.Name, value)
	if f.Expected != "" {
		s += fmt.Sprintf(", expected %s", f.Expected)
	}
	if f.Direction != "" {
		s += " (" + f.Direction + ")"
	}
	return s
}

func readCSV(path string, c data.CSVConfig) (*data.Dataset, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	return data.ReadCSV(f, path, c)
}

func writePayments(path string, ps []payments.Payment, withLabel bool) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	if err := payments.Write(f, ps, withLabel); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}

func writePaymentScores(path string, kept []string, scores []ae.Score) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	w := csv.NewWriter(f)
	w.Write([]string{"payment_id", "score", "threshold", "anomaly", "feature1", "expected1", "direction1", "status", "injected_pattern"})
	for i, s := range scores {
		var top anomaly.Feature
		if len(s.Top) > 0 {
			top = s.Top[0]
		}
		status := "ok"
		if s.Read != "" {
			status = "read: " + s.Read
		}
		w.Write([]string{kept[2*i], strconv.FormatFloat(s.Value, 'g', 6, 64), strconv.FormatFloat(s.Threshold, 'g', 6, 64),
			strconv.FormatBool(s.Anomaly), top.Name, top.Expected, top.Direction, status, kept[2*i+1]})
	}
	w.Flush()
	if err := w.Error(); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}
