package report

import (
	"fmt"
	"math"

	"github.com/quernlab/quern/train"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
)

// Series is a per-epoch quantity computed outside the training history,
// such as a Fréchet distance measured after each epoch. NaN marks an
// epoch without a value.
type Series struct {
	Name  string
	Title string // the panel's title (default: Name)
	Y     []float64
}

// CurveOptions chooses what LossCurves draws. The zero value draws every
// metric of the history and marks the best epoch.
type CurveOptions struct {
	// Metrics lists the training metrics to draw (nil: all of them).
	Metrics []string
	// Extra adds per-epoch series, each in a panel of its own.
	Extra []Series
	// NoBest leaves out the best-epoch marker: for a GAN the lowest
	// validation loss of the discriminator marks no better generator.
	NoBest bool
}

// groups puts metrics of one scale and meaning on one panel; a metric
// not listed gets a panel of its own.
var groups = []struct {
	title   string
	metrics []string
}{
	{"Loss per row", []string{"loss"}},
	{"Adversarial losses", []string{"d_loss", "g_loss"}},
	{"Discriminator output, real and generated rows", []string{"d_real", "d_fake"}},
}

// titles names the panels of single metrics that have a better title
// than their name.
var titles = map[string]string{
	"kl":             "KL divergence (nats per row)",
	"reconstruction": "Reconstruction term (per row)",
	"beta":           "KL weight (beta)",
	"d_accuracy":     "Discriminator accuracy",
	"spread":         "Spread of generated rows over real rows'",
	"sparsity":       "Sparsity penalty",
	"head":           "Classification head loss",
}

func groupOf(name string) int {
	for i, g := range groups {
		for _, m := range g.metrics {
			if m == name {
				return i
			}
		}
	}
	return -1
}

// LossCurves draws the training history per epoch: the training metrics
// and their validation counterparts (dashed), with quantities of different
// scale on panels of their own (a log axis where a series spans decades),
// legends beside the panels, and a vertical line at the best epoch.
// A metric that equals the loss at every epoch, or never changes, is left
// out.
func LossCurves(path string, h *train.History, opt CurveOptions) error {
	if h == nil || len(h.Epochs) == 0 {
		return fmt.Errorf("report: no epochs to plot")
	}
	n := len(h.Epochs)
	want := map[string]bool{}
	for _, m := range opt.Metrics {
		want[m] = true
	}
	series := func(val bool, i int) []float64 {
		y := make([]float64, n)
		for e, r := range h.Epochs {
			ms := r.Train
			if val {
				ms = r.Validation
			}
			y[e] = math.NaN()
			if i < len(ms) {
				y[e] = ms[i].Value
			}
		}
		return y
	}
	valIndex := func(name string) int {
		for i, m := range h.Epochs[0].Validation {
			if m.Name == name {
				return i
			}
		}
		return -1
	}
	type line struct {
		name string
		y    []float64
		val  bool
		k    int
	}
	var order []string // panel keys in order of first appearance
	byKey := map[string][]line{}
	panelTitle := map[string]string{}
	k := 0
	for i, m := range h.Epochs[0].Train {
		if opt.Metrics != nil && !want[m.Name] {
			continue
		}
		y := series(false, i)
		if i > 0 && (equalSeries(y, series(false, 0)) || constant(y)) {
			continue
		}
		key, title := m.Name, m.Name
		if t, ok := titles[m.Name]; ok {
			title = t
		}
		if g := groupOf(m.Name); g >= 0 {
			key, title = fmt.Sprintf("group%d", g), groups[g].title
		}
		if _, ok := byKey[key]; !ok {
			order = append(order, key)
			panelTitle[key] = title
		}
		byKey[key] = append(byKey[key], line{"training " + m.Name, y, false, k})
		if j := valIndex(m.Name); j >= 0 {
			byKey[key] = append(byKey[key], line{"validation " + m.Name, series(true, j), true, k})
		}
		k++
	}
	var panels []*panel
	for _, key := range order {
		ls := byKey[key]
		if key == ls[0].name[len("training "):] {
			// one metric on the panel, named in its title
			for i := range ls {
				if ls[i].val {
					ls[i].name = "validation"
				} else {
					ls[i].name = "training"
				}
			}
		}
		pn := newPanel(panelTitle[key], "epoch", "")
		var ys [][]float64
		for _, l := range ls {
			ys = append(ys, l.y)
		}
		if logWorthy(ys...) {
			pn.p.Y.Scale = plot.LogScale{}
			pn.p.Y.Tick.Marker = plot.LogTicks{Prec: -1}
			pn.p.Y.Label.Text = "log scale"
		}
		for _, l := range ls {
			if err := addLine(pn, l.name, l.y, l.k, l.val); err != nil {
				return err
			}
		}
		epochAxis(pn, n)
		if key == "group0" && !opt.NoBest && h.BestEpoch > 0 { // the loss panel
			addBest(pn, h.BestEpoch)
		}
		panels = append(panels, pn)
	}
	for i, s := range opt.Extra {
		title := s.Title
		if title == "" {
			title = s.Name
		}
		pn := newPanel(title, "epoch", "")
		var finite []float64
		for _, v := range s.Y {
			if !math.IsNaN(v) {
				finite = append(finite, v)
			}
		}
		if logWorthy(finite) {
			pn.p.Y.Scale = plot.LogScale{}
			pn.p.Y.Tick.Marker = plot.LogTicks{Prec: -1}
			pn.p.Y.Label.Text = "log scale"
		}
		if err := addLine(pn, s.Name, s.Y, k+i, false); err != nil {
			return err
		}
		epochAxis(pn, n)
		panels = append(panels, pn)
	}
	cols := 1
	if len(panels) > 2 {
		cols = 2
	}
	return savePanels(path, panels, cols)
}

func addLine(pn *panel, name string, y []float64, k int, dashed bool) error {
	var pts plotter.XYs
	for e, v := range y {
		if !math.IsNaN(v) && !math.IsInf(v, 0) && (v > 0 || !isLog(pn.p)) {
			pts = append(pts, plotter.XY{X: float64(e + 1), Y: v})
		}
	}
	if len(pts) == 0 {
		return nil
	}
	l, s, err := plotter.NewLinePoints(pts)
	if err != nil {
		return fmt.Errorf("report: %s: %w", name, err)
	}
	c := colourOf(k)
	l.Color, l.Width = c, vg.Points(1.8)
	s.Color, s.Radius = c, vg.Points(2)
	if dashed {
		l.Dashes = []vg.Length{vg.Points(5), vg.Points(3)}
		s.Shape = shapeOf(len(Palette)) // a triangle tells validation apart in grey print
	}
	if len(pts) > maxMarkedEpochs {
		// a marker an epoch would merge into a thick band: the line
		// alone (dashes still tell validation apart)
		pn.p.Add(l)
		pn.add(name, l)
		return nil
	}
	pn.p.Add(l, s)
	pn.add(name, l, s)
	return nil
}

// maxMarkedEpochs is the most epochs whose points get a marker each.
const maxMarkedEpochs = 60

func isLog(p *plot.Plot) bool {
	_, ok := p.Y.Scale.(plot.LogScale)
	return ok
}

// addBest draws a dotted vertical line at the best epoch, inside the frame.
func addBest(pn *panel, epoch int) {
	lo, hi := pn.p.Y.Min, pn.p.Y.Max
	l, err := plotter.NewLine(plotter.XYs{{X: float64(epoch), Y: lo}, {X: float64(epoch), Y: hi}})
	if err != nil {
		return
	}
	l.Color = colourOf(5)
	l.Width = vg.Points(1.2)
	l.Dashes = []vg.Length{vg.Points(2), vg.Points(2)}
	pn.p.Add(l)
	pn.add(fmt.Sprintf("best epoch (%d)", epoch), l)
}

// epochAxis makes the x axis run from half an epoch before the first to
// half after the last, with whole-number ticks.
func epochAxis(pn *panel, n int) {
	pn.p.X.Min, pn.p.X.Max = 0.5, float64(n)+0.5
	pn.p.X.Tick.Marker = integerTicks{}
	if isLog(pn.p) {
		// a little room above and below, on the log scale
		pn.p.Y.Min /= 1.15
		pn.p.Y.Max *= 1.15
		return
	}
	pad(&pn.p.Y, 0.06)
}

func equalSeries(a, b []float64) bool {
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func constant(y []float64) bool {
	for _, v := range y {
		if v != y[0] {
			return false
		}
	}
	return len(y) > 1
}
