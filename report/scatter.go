package report

import (
	"fmt"
	"image/color"
	"math"
	"sort"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
)

// ScoreHistogram plots the distribution of anomaly scores (log10, as
// reconstruction errors and densities span decades) with the threshold as
// a dashed line inside the frame; positive, when given, splits the bars
// into known-normal and known-anomalous rows, each group scaled to area 1
// so that a few anomalies beside many normal rows show. what names the
// score, for example "reconstruction error".
func ScoreHistogram(path string, scores []float64, threshold float64, positive []bool, what string) error {
	if len(scores) == 0 {
		return fmt.Errorf("report: no scores to plot")
	}
	if what == "" {
		what = "score"
	}
	// negative ELBOs may be negative: log only when every score is positive
	useLog := threshold > 0
	for _, s := range scores {
		if !(s > 0) {
			useLog = false
			break
		}
	}
	tf := func(v float64) float64 { return v }
	xl := what
	if useLog {
		tf = math.Log10
		xl = "log10 of " + what
	}
	pn := newPanel("Anomaly scores", xl, "rows")
	split := func(want bool) plotter.Values {
		var v plotter.Values
		for i, s := range scores {
			if !math.IsNaN(s) && !math.IsInf(s, 0) && (positive == nil || positive[i] == want) {
				v = append(v, tf(s))
			}
		}
		return v
	}
	groups := []struct {
		name string
		vals plotter.Values
	}{{"rows", split(false)}}
	if positive != nil {
		groups = []struct {
			name string
			vals plotter.Values
		}{{"normal", split(false)}, {"anomalous", split(true)}}
	}
	lo, hi := tf(threshold), tf(threshold)
	for _, g := range groups {
		for _, v := range g.vals {
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
	}
	bins := 40
	// normal and anomalous rows each scaled to the same area: a few
	// anomalies beside thousands of normal rows stay visible
	scaled := positive != nil && len(groups[0].vals) > 0 && len(groups[1].vals) > 0
	if scaled {
		pn.p.Y.Label.Text = "density (each group's area 1)"
	}
	for i, g := range groups {
		if len(g.vals) == 0 {
			continue
		}
		h, err := plotter.NewHist(g.vals, bins)
		if err != nil {
			return fmt.Errorf("report: %w", err)
		}
		if scaled {
			h.Normalize(1)
		}
		c := colourOf(2 + 3*i) // sky blue, vermillion
		h.FillColor = color.NRGBA{c.R, c.G, c.B, 150}
		h.LineStyle.Width = 0
		pn.p.Add(h)
		pn.add(g.name, h)
	}
	pn.p.X.Min, pn.p.X.Max = lo, hi
	pad(&pn.p.X, 0.04)
	pn.p.Y.Min = 0
	pn.p.Y.Max *= 1.08
	line, err := plotter.NewLine(plotter.XYs{{X: tf(threshold), Y: 0}, {X: tf(threshold), Y: pn.p.Y.Max}})
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	line.Color = color.Black
	line.Width = vg.Points(2)
	line.Dashes = []vg.Length{vg.Points(6), vg.Points(3)}
	pn.p.Add(line)
	pn.add(fmt.Sprintf("threshold %.4g", threshold), line)
	return savePanels(path, []*panel{pn}, 1)
}

// className names label k for legends.
func className(k int, names []string) string {
	switch {
	case k >= 0 && k < len(names):
		return names[k]
	case k < 0:
		return "unlabelled"
	}
	return fmt.Sprintf("class %d", k)
}

// scatterPanel draws points (x, y) grouped by label, coloured and shaped
// per class, with the axes padded so no point sits on the frame.
func scatterPanel(title, xl, yl string, xs, ys []float64, labels []int, names []string, legend bool) (*panel, error) {
	pn := newPanel(title, xl, yl)
	groups := map[int]plotter.XYs{}
	for i := range xs {
		l := 0
		if labels != nil {
			l = labels[i]
		}
		groups[l] = append(groups[l], plotter.XY{X: xs[i], Y: ys[i]})
	}
	keys := make([]int, 0, len(groups))
	for k := range groups {
		keys = append(keys, k)
	}
	sort.Ints(keys)
	for _, k := range keys {
		s, err := plotter.NewScatter(groups[k])
		if err != nil {
			return nil, fmt.Errorf("report: %w", err)
		}
		c := colourOf(k)
		if labels == nil {
			c = colourOf(4)
		}
		s.GlyphStyle.Color = color.NRGBA{c.R, c.G, c.B, 170}
		s.GlyphStyle.Shape = shapeOf(k)
		s.GlyphStyle.Radius = vg.Points(2)
		pn.p.Add(s)
		if labels != nil && legend {
			pn.add(className(k, names), s)
		}
	}
	pad(&pn.p.X, 0.04)
	pad(&pn.p.Y, 0.04)
	return pn, nil
}

// LatentScatter plots 2-D points (rows x 2), coloured and shaped by label
// when labels is not nil (names label them; a negative label is
// "unlabelled").
func LatentScatter(path string, codes []float32, labels []int, names []string) error {
	n := len(codes) / 2
	if n == 0 {
		return fmt.Errorf("report: no codes to plot")
	}
	xs, ys := make([]float64, n), make([]float64, n)
	for i := 0; i < n; i++ {
		xs[i], ys[i] = float64(codes[2*i]), float64(codes[2*i+1])
	}
	pn, err := scatterPanel("Latent space", "z0", "z1", xs, ys, labels, names, true)
	if err != nil {
		return err
	}
	return savePanels(path, []*panel{pn}, 1)
}

// Project returns the rows' coordinates on their first two principal
// components (rows x 2) and the share of the variance each explains. A
// width of one gives a zero second coordinate.
func Project(x []float32, rows, width int) ([]float64, [2]float64, error) {
	if rows < 2 || width < 1 || len(x) != rows*width {
		return nil, [2]float64{}, fmt.Errorf("report: %d values are not %d rows of %d", len(x), rows, width)
	}
	out := make([]float64, 2*rows)
	if width == 1 {
		for i := 0; i < rows; i++ {
			out[2*i] = float64(x[i])
		}
		return out, [2]float64{1, 0}, nil
	}
	d := make([]float64, len(x))
	for i, v := range x {
		d[i] = float64(v)
	}
	m := mat.NewDense(rows, width, d)
	var pc stat.PC
	if !pc.PrincipalComponents(m, nil) {
		return nil, [2]float64{}, fmt.Errorf("report: the principal components of the codes could not be found")
	}
	var vecs mat.Dense
	pc.VectorsTo(&vecs)
	vars := pc.VarsTo(nil)
	var proj mat.Dense
	proj.Mul(m, vecs.Slice(0, width, 0, 2))
	total := 0.0
	for _, v := range vars {
		total += v
	}
	var share [2]float64
	if total > 0 {
		share = [2]float64{vars[0] / total, vars[1] / total}
	}
	for i := 0; i < rows; i++ {
		out[2*i], out[2*i+1] = proj.At(i, 0), proj.At(i, 1)
	}
	return out, share, nil
}

// LatentMap draws the codes of a model of any code width: a projection on
// their first two principal components (all dimensions count), and beside
// it, when there are more than two dimensions, the scatter of each pair
// of the first four, all coloured by label where labels exist.
func LatentMap(path string, codes []float32, rows, width int, labels []int, names []string) error {
	return mapRows(path, "Codes", codes, rows, width, labels, names, nil)
}

// RowMap is LatentMap for data rows (real and generated, say): the
// projection on their first two principal components and the pairs of the
// first four columns, named by columns where given.
//
// The projection is of the standardised columns (each to mean 0 and
// standard deviation 1 over all the rows given), so that a column in
// large units does not stand for all of them; the pairs keep raw units.
func RowMap(path string, x []float32, rows, width int, labels []int, names, columns []string) error {
	return mapRows(path, "Rows", x, rows, width, labels, names, columns)
}

// standardised returns a copy of x with each column at mean 0 and
// standard deviation 1 (a constant column at 0).
func standardised(x []float32, rows, width int) []float32 {
	out := make([]float32, len(x))
	for j := 0; j < width; j++ {
		var sum, sq float64
		for i := 0; i < rows; i++ {
			sum += float64(x[i*width+j])
		}
		mean := sum / float64(rows)
		for i := 0; i < rows; i++ {
			d := float64(x[i*width+j]) - mean
			sq += d * d
		}
		sd := math.Sqrt(sq / float64(rows))
		for i := 0; i < rows; i++ {
			if sd > 0 {
				out[i*width+j] = float32((float64(x[i*width+j]) - mean) / sd)
			}
		}
	}
	return out
}

func mapRows(path, what string, codes []float32, rows, width int, labels []int, names, columns []string) error {
	col := func(j int) string {
		if j < len(columns) && columns[j] != "" {
			return columns[j]
		}
		if what == "Codes" {
			return fmt.Sprintf("z%d", j)
		}
		return fmt.Sprintf("column %d", j+1)
	}
	src := codes
	if what == "Rows" {
		src = standardised(codes, rows, width)
	}
	proj, share, err := Project(src, rows, width)
	if err != nil {
		return err
	}
	xs, ys := make([]float64, rows), make([]float64, rows)
	for i := 0; i < rows; i++ {
		xs[i], ys[i] = proj[2*i], proj[2*i+1]
	}
	title := fmt.Sprintf("%s: first two principal components of %d dimensions", what, width)
	if what == "Rows" {
		title = fmt.Sprintf("Rows: first two principal components of %d standardised columns", width)
	}
	if width <= 2 {
		title = fmt.Sprintf("%s (%d dimensions)", what, width)
		for i := 0; i < rows; i++ {
			xs[i] = float64(codes[i*width])
			ys[i] = 0
			if width == 2 {
				ys[i] = float64(codes[i*width+1])
			}
		}
	}
	xl := fmt.Sprintf("PC1 (%.0f%% of the variance)", 100*share[0])
	yl := fmt.Sprintf("PC2 (%.0f%%)", 100*share[1])
	if width <= 2 {
		xl, yl = col(0), col(1)
	}
	main, err := scatterPanel(title, xl, yl, xs, ys, labels, names, true)
	if err != nil {
		return err
	}
	panels := []*panel{main}
	if width > 2 {
		k := min(width, 4)
		for a := 0; a < k; a++ {
			for b := a + 1; b < k; b++ {
				px, py := make([]float64, rows), make([]float64, rows)
				for i := 0; i < rows; i++ {
					px[i], py[i] = float64(codes[i*width+a]), float64(codes[i*width+b])
				}
				pn, err := scatterPanel(fmt.Sprintf("%s against %s", col(b), col(a)), col(a), col(b), px, py, labels, names, false)
				if err != nil {
					return err
				}
				panels = append(panels, pn)
			}
		}
	}
	// the projection on top at full width, the pairs below, three a row
	rowsOf := [][]*panel{panels[:1]}
	for i := 1; i < len(panels); i += 3 {
		rowsOf = append(rowsOf, panels[i:min(len(panels), i+3)])
	}
	return saveRows(path, rowsOf)
}
