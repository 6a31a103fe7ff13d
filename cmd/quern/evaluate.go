package main

import (
	"encoding/json"
	"fmt"
	"math"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/report"
)

// cmdEvaluate measures a model's anomaly scores against labelled rows:
// ROC AUC, average precision, and at the model's threshold the confusion
// counts, precision, recall, F1 and false-alarm rate; with -out, the ROC
// and precision-recall curves; with -recalibrate, a copy of the model
// whose threshold is set again on the file's normal rows, without
// retraining.
func cmdEvaluate(e *env, args []string) error {
	fs := newFlags(e, "evaluate", "-model MODEL -data FILE (-label COLUMN | -labels IDX) [-normal 0] [-out DIR] [-recalibrate NEW.qm]")
	modelPath := fs.String("model", "", "model file with anomaly scores: an autoencoder or a VAE (required)")
	var d dataFlags
	d.registerForModel(fs)
	fs.Lookup("label").Usage = "CSV column holding each row's label, a number or a text (-normal names the normal ones)"
	normal := fs.String("normal", "0", "comma-separated label values (numbers or text) of normal rows, the word empty for an empty cell; every other value is anomalous, and empty cells not named are left out")
	out := fs.String("out", "", "folder for the ROC and precision-recall curves and a page")
	recal := fs.String("recalibrate", "", "write a copy of the model to this file with its threshold set on the file's normal rows (no retraining)")
	falseAlarm := fs.Float64("false-alarm", 0.01, "with -recalibrate: target false-alarm rate of the new threshold")
	quiet := fs.Bool("quiet", false, "no progress output")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	if d.label == "" && d.labels == "" {
		return usagef("-label COLUMN (CSV) or -labels FILE (idx) is required: evaluation needs to know which rows are anomalous")
	}
	if *recal != "" && !(*falseAlarm > 0 && *falseAlarm < 1) {
		return usagef("-false-alarm %v: want a rate between 0 and 1, such as 0.01", *falseAlarm)
	}
	normals := map[string]bool{}
	for _, s := range splitList(*normal) {
		if s == "empty" {
			s = ""
		}
		normals[s] = true
	}
	if len(normals) == 0 {
		return usagef("-normal: name at least one label value of normal rows (0, ok, empty, ...)")
	}
	// a CSV label column is read as text, so that labels may be names
	// (bearing_wear, fraud) as well as numbers
	textLabel := d.label
	if textLabel != "" {
		d.keep, d.exclude, d.label = textLabel, textLabel, ""
	}
	if err := reportFolder(*out); err != nil {
		return err
	}
	st := newStatus(e.stderr, *quiet)
	defer st.end()
	st.begin("open", nil)
	l, sc, err := openAs[model.Scorer]("evaluate", "a model with anomaly scores (an autoencoder or a VAE)",
		map[string]string{"-data": d.path, "-model": *modelPath, "-out": "", "-recalibrate": *recal})
	if err != nil {
		return err
	}
	if *recal != "" {
		if err := writable(*recal, "-recalibrate"); err != nil {
			return err
		}
	}
	ds, err := l.loadRows(&d, st)
	if err != nil {
		return err
	}
	labelOf := func(i int) (string, bool) {
		if textLabel != "" {
			s := strings.TrimSpace(ds.Kept[i])
			return s, s != "" || normals[""]
		}
		if ds.Labels == nil || ds.Labels[i] == data.Unlabelled {
			return "", false
		}
		return strconv.Itoa(ds.Labels[i]), true
	}
	if textLabel == "" && ds.Labels == nil {
		return fmt.Errorf("%s: no labels were read", d.path)
	}
	// rows with a level never seen in training, by what reading them said
	unseenRow := map[int]bool{}
	for _, n := range ds.Notes {
		if data.NoteUnseen(n.Text) != "" {
			unseenRow[n.Row] = true
		}
	}
	// the labelled rows, in file order
	var x []float32
	var positive, unseenAt []bool
	skipped := 0
	for i := 0; i < ds.Rows; i++ {
		lab, ok := labelOf(i)
		if !ok {
			skipped++
			continue
		}
		x = append(x, ds.Row(i)...)
		positive = append(positive, !normals[lab])
		unseenAt = append(unseenAt, unseenRow[i])
	}
	n := len(positive)
	np := 0
	for _, p := range positive {
		if p {
			np++
		}
	}
	if np == 0 || np == n {
		return fmt.Errorf("%s: %d labelled rows, %d of them anomalous: evaluation needs both normal (-normal %s) and anomalous rows", d.path, n, np, *normal)
	}
	if *recal != "" {
		c, ok := l.model.(model.Calibrator)
		if !ok {
			return l.cannot("-recalibrate", "a model whose threshold can be set")
		}
		var nx []float32
		for i, p := range positive {
			if !p {
				nx = append(nx, x[i*ds.Cols:(i+1)*ds.Cols]...)
			}
		}
		st.begin("calibrate", func() string { return fmt.Sprintf("%d normal rows", n-np) })
		th, err := c.Calibrate(nx, n-np, anomaly.Config{FalseAlarm: *falseAlarm})
		if err != nil {
			return fmt.Errorf("-recalibrate: %w", err)
		}
		st.begin("write", nil)
		if err := writeRecalibrated(*recal, l); err != nil {
			return err
		}
		st.end()
		fmt.Fprintf(e.stderr, "wrote %s: the model with its threshold set on %d normal rows of %s: %.6g (expected false-alarm rate %.2f%%%s)\n",
			*recal, n-np, d.path, th.Value, 100*th.ExpectedFalseAlarm, boundPhrase(th))
	}
	th := sc.Calibrated()
	if th == nil {
		return fmt.Errorf("%s has no threshold; give -recalibrate NEW.qm to set one on this file's normal rows", *modelPath)
	}
	scores := make([]float64, 0, n)
	err = inChunks(st, "score", n, func(lo, hi int) ([]float64, error) {
		return sc.RowScores(x[lo*ds.Cols:hi*ds.Cols], hi-lo)
	}, func(lo, hi int, s []float64) error {
		scores = append(scores, s...)
		return nil
	})
	if err != nil {
		return err
	}
	// a row with a level never seen in training is flagged whatever its
	// score (model Score): here it ranks as the most surprising
	unseen := 0
	ranked := scores
	for i, u := range unseenAt {
		if u {
			if unseen == 0 {
				ranked = append([]float64(nil), scores...)
			}
			ranked[i] = math.MaxFloat64
			unseen++
		}
	}
	roc, pr, ap, err := anomaly.Curves(ranked, positive)
	if err != nil {
		return err
	}
	auc, err := anomaly.ROCAUC(ranked, positive)
	if err != nil {
		return err
	}
	c, err := anomaly.CountsAt(ranked, positive, th.Value)
	if err != nil {
		return err
	}
	lines := []string{
		fmt.Sprintf("evaluated %d labelled rows of %s: %d normal, %d anomalous", n, d.path, n-np, np),
		fmt.Sprintf("ROC AUC %.4f, average precision %.4f (a random order scores %.4f)", auc, ap, float64(np)/float64(n)),
		fmt.Sprintf("at the threshold %.6g: %d anomalous rows flagged, %d missed; %d normal rows flagged, %d passed", th.Value, c.TP, c.FN, c.FP, c.TN),
		fmt.Sprintf("precision %s, recall %s, F1 %s, false-alarm rate %.2f%% (expected %.2f%%%s)", ratioText(c.Precision(), "no row flagged"), ratioText(c.Recall(), "no anomalous row"), ratioText(c.F1(), "no row flagged or anomalous"), 100*c.FalseAlarmRate(), 100*th.ExpectedFalseAlarm, boundPhrase(*th)),
	}
	if skipped > 0 {
		lines = append(lines, fmt.Sprintf("%d unlabelled rows left out", skipped))
	}
	if unseen > 0 {
		lines = append(lines, fmt.Sprintf("%s with a category level never seen in training, counted as flagged and ranked first", plural(unseen, "row")))
	}
	st.end()
	for _, line := range lines {
		fmt.Fprintln(e.stdout, line)
	}
	fmt.Fprintln(e.stderr, anomaly.Caution)
	if *out != "" {
		st.begin("report", nil)
		if err := report.EvaluationCurves(filepath.Join(*out, "curves.png"), roc, pr, c, auc, ap); err != nil {
			return err
		}
		pg := report.Page{Title: "quern evaluation: " + filepath.Base(*modelPath) + " on " + filepath.Base(d.path), Caution: anomaly.Caution,
			Generated: time.Now().UTC().Format("2006-01-02 15:04 UTC"), Version: version(), RunTime: shortDuration(time.Since(st.begun)),
			Summary: []report.Setting{
				{Name: "labelled rows", Value: fmt.Sprintf("%d (%d normal, %d anomalous; normal labels %s)", n, n-np, np, *normal)},
				{Name: "ROC AUC", Value: fmt.Sprintf("%.4f", auc)},
				{Name: "average precision", Value: fmt.Sprintf("%.4f", ap)},
				{Name: "threshold", Value: fmt.Sprintf("%.6g (%s)", th.Value, th.Method)},
				{Name: "precision / recall / F1", Value: fmt.Sprintf("%s / %s / %s", ratioText(c.Precision(), "no row flagged"), ratioText(c.Recall(), "no anomalous row"), ratioText(c.F1(), "no row flagged or anomalous"))},
				{Name: "false-alarm rate", Value: fmt.Sprintf("%.2f%% (expected %.2f%%%s)", 100*c.FalseAlarmRate(), 100*th.ExpectedFalseAlarm, boundPhrase(*th))},
				{Name: "flagged anomalous / missed / flagged normal / passed normal", Value: fmt.Sprintf("%d / %d / %d / %d", c.TP, c.FN, c.FP, c.TN)},
			},
			Figures: []report.Figure{{File: "curves.png", Caption: "Left: recall against false-alarm rate as the threshold falls; right: precision against recall; the dot is the model's threshold."}}}
		top, err := topRows(sc, x, ds.Cols, scores, ranked, unseenAt, positive, labelOf, reportTopRows)
		if err != nil {
			return err
		}
		pg.Tables = append(pg.Tables, top)
		if err := pg.Write(*out); err != nil {
			return err
		}
		st.end()
		fmt.Fprintf(e.stderr, "report: %s\n", filepath.Join(*out, "index.html"))
	}
	st.done()
	return nil
}

// writeRecalibrated writes the model, with its new threshold, keeping the
// original file's provenance and its training and command sections.
func writeRecalibrated(path string, l *loaded) error {
	prov, _ := modelfile.ProvenanceOf(l.file)
	f, err := l.model.File(prov)
	if err != nil {
		return err
	}
	for _, key := range []string{"training", commandSection} {
		var raw json.RawMessage
		if ok, err := l.file.Section(key, &raw); ok && err == nil {
			if err := f.SetSection(key, raw); err != nil {
				return err
			}
		}
	}
	return modelfile.Write(path, f)
}

// boundPhrase is ", below B% with 95% confidence" for a threshold with a
// false-alarm bound, empty for one calibrated before bounds were kept.
func boundPhrase(th anomaly.Threshold) string {
	if th.FalseAlarmBound <= 0 {
		return ""
	}
	return fmt.Sprintf(", below %.2f%% with %.0f%% confidence", 100*th.FalseAlarmBound, 100*anomaly.BoundConfidence)
}

// ratioText writes a ratio with four decimals, or says why it has none
// (a NaN: nothing to divide by).
func ratioText(v float64, why string) string {
	if math.IsNaN(v) {
		return "undefined (" + why + ")"
	}
	return fmt.Sprintf("%.4f", v)
}

// reportTopRows is how many of the highest-scoring rows the evaluation
// page explains.
const reportTopRows = 20

// topRows is a table of the n highest-ranked labelled rows (by ranked:
// the scores, a row with a level never seen in training first): each one's
// label, score and the columns behind it with what the model expected
// there (a category's level, a number's reconstruction) and how the row
// stands to it.
func topRows(sc model.Scorer, x []float32, cols int, scores, ranked []float64, unseen, positive []bool, labelOf func(int) (string, bool), n int) (report.Table, error) {
	order := make([]int, len(scores))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return ranked[order[a]] > ranked[order[b]] })
	order = order[:min(n, len(order))]
	var rows []float32
	for _, i := range order {
		rows = append(rows, x[i*cols:(i+1)*cols]...)
	}
	assessed, err := sc.Score(rows, len(order), 3)
	if err != nil {
		return report.Table{}, err
	}
	t := report.Table{Caption: fmt.Sprintf("The %d highest-scoring labelled rows and the columns behind each score (share of the score; what the model expected there, and how the row stands to it)", len(order)),
		Header: []string{"labelled row", "label", "score", "flagged", "columns behind the score"}}
	// the labelled rows' own numbers, 1-based in file order of the
	// labelled rows
	labels := make([]string, 0, len(positive))
	for i := 0; len(labels) < len(positive); i++ {
		if l, ok := labelOf(i); ok {
			labels = append(labels, l)
		}
	}
	for k, i := range order {
		a := assessed[k]
		var parts []string
		for _, f := range a.Top {
			p := fmt.Sprintf("%s %.0f%%", f.Name, 100*f.Share)
			switch {
			case f.Expected != "" && f.Direction != "":
				p += fmt.Sprintf(" (expected %s, %s)", f.Expected, f.Direction)
			case f.Expected != "":
				p += fmt.Sprintf(" (expected %s)", f.Expected)
			}
			parts = append(parts, p)
		}
		if a.Unscorable != "" {
			parts = []string{"unscorable: " + a.Unscorable}
		}
		flagged := a.Anomaly
		if unseen[i] {
			parts = append([]string{"a level never seen in training"}, parts...)
			flagged = true
		}
		t.Rows = append(t.Rows, []string{strconv.Itoa(i + 1), labels[i], strconv.FormatFloat(scores[i], 'g', 5, 64), strconv.FormatBool(flagged), strings.Join(parts, "; ")})
	}
	return t, nil
}
