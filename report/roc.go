package report

import (
	"fmt"
	"image/color"

	"github.com/quernlab/quern/anomaly"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// EvaluationCurves draws the ROC curve and the precision-recall curve of
// a labelled evaluation side by side, with the model's threshold marked
// on both (at, the counts there) and the chance levels dashed.
func EvaluationCurves(path string, roc, pr []anomaly.Point, at anomaly.Counts, auc, ap float64) error {
	if len(roc) < 2 || len(pr) < 1 {
		return fmt.Errorf("report: no curve to draw")
	}
	xy := func(ps []anomaly.Point) plotter.XYs {
		out := make(plotter.XYs, len(ps))
		for i, p := range ps {
			out[i] = plotter.XY{X: p.X, Y: p.Y}
		}
		return out
	}
	mark := func(pn *panel, x, y float64) error {
		if x != x || y != y { // NaN: nothing flagged
			return nil
		}
		s, err := plotter.NewScatter(plotter.XYs{{X: x, Y: y}})
		if err != nil {
			return err
		}
		s.GlyphStyle.Color = colourOf(5)
		s.GlyphStyle.Radius = vg.Points(5)
		s.GlyphStyle.Shape = draw.CircleGlyph{}
		pn.p.Add(s)
		pn.add("the model's threshold", s)
		return nil
	}
	chance := func(pn *panel, y0, y1 float64, name string) error {
		l, err := plotter.NewLine(plotter.XYs{{X: 0, Y: y0}, {X: 1, Y: y1}})
		if err != nil {
			return err
		}
		l.Color = color.Gray{150}
		l.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
		pn.p.Add(l)
		pn.add(name, l)
		return nil
	}
	curve := func(pn *panel, pts plotter.XYs, name string) error {
		l, err := plotter.NewLine(pts)
		if err != nil {
			return err
		}
		l.Color, l.Width = colourOf(4), vg.Points(2)
		pn.p.Add(l)
		pn.add(name, l)
		return nil
	}
	rp := newPanel("ROC curve", "false-alarm rate", "recall")
	pp := newPanel("Precision and recall", "recall", "precision")
	pos := float64(at.TP + at.FN)
	base := pos / (pos + float64(at.FP+at.TN))
	steps := []func() error{
		func() error { return curve(rp, xy(roc), fmt.Sprintf("ROC AUC %.4f", auc)) },
		func() error { return chance(rp, 0, 1, "chance") },
		func() error { return mark(rp, at.FalseAlarmRate(), at.Recall()) },
		func() error { return curve(pp, xy(pr), fmt.Sprintf("average precision %.4f", ap)) },
		func() error { return chance(pp, base, base, "share anomalous") },
		func() error { return mark(pp, at.Recall(), at.Precision()) },
	}
	for _, f := range steps {
		if err := f(); err != nil {
			return fmt.Errorf("report: %w", err)
		}
	}
	for _, pn := range []*panel{rp, pp} {
		pn.p.X.Min, pn.p.X.Max, pn.p.Y.Min, pn.p.Y.Max = 0, 1, 0, 1
		pad(&pn.p.X, 0.02)
		pad(&pn.p.Y, 0.02)
	}
	return savePanels(path, []*panel{rp, pp}, 2)
}
