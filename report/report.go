package report

import (
	"fmt"
	"html/template"
	"image"
	"image/color"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"sort"

	"github.com/quernlab/quern/train"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
)

// palette holds distinguishable colours for series and classes.
var palette = []color.RGBA{
	{31, 119, 180, 255}, {255, 127, 14, 255}, {44, 160, 44, 255}, {214, 39, 40, 255},
	{148, 103, 189, 255}, {140, 86, 75, 255}, {227, 119, 194, 255}, {127, 127, 127, 255},
	{188, 189, 34, 255}, {23, 190, 207, 255},
}

func save(p *plot.Plot, path string) error {
	if err := p.Save(7*vg.Inch, 4.5*vg.Inch, path); err != nil {
		return fmt.Errorf("report: %s: %w", path, err)
	}
	return nil
}

// LossCurves plots every training metric whose name is listed in metrics
// (all of them when nil) and the validation loss per epoch.
func LossCurves(path string, h *train.History, metrics []string) error {
	if h == nil || len(h.Epochs) == 0 {
		return fmt.Errorf("report: no epochs to plot")
	}
	p := plot.New()
	p.Title.Text = "Training curves"
	p.X.Label.Text = "epoch"
	p.Y.Label.Text = "per-row value"
	want := map[string]bool{}
	for _, m := range metrics {
		want[m] = true
	}
	k := 0
	add := func(name string, pts plotter.XYs) error {
		l, err := plotter.NewLine(pts)
		if err != nil {
			return err
		}
		l.Color = palette[k%len(palette)]
		l.Width = vg.Points(1.5)
		k++
		p.Add(l)
		p.Legend.Add(name, l)
		return nil
	}
	for i, m := range h.Epochs[0].Train {
		if metrics != nil && !want[m.Name] {
			continue
		}
		if i > 0 && sameSeries(h, 0, i) {
			continue // e.g. a reconstruction term that is the whole loss
		}
		pts := make(plotter.XYs, len(h.Epochs))
		for e, r := range h.Epochs {
			pts[e].X, pts[e].Y = float64(e+1), r.Train[i].Value
		}
		if err := add("train "+m.Name, pts); err != nil {
			return err
		}
	}
	if len(h.Epochs[0].Validation) > 0 {
		pts := make(plotter.XYs, len(h.Epochs))
		for e, r := range h.Epochs {
			pts[e].X, pts[e].Y = float64(e+1), r.Validation[0].Value
		}
		if err := add("validation "+h.Epochs[0].Validation[0].Name, pts); err != nil {
			return err
		}
	}
	if h.BestEpoch > 0 {
		best := plotter.XYs{{X: float64(h.BestEpoch), Y: h.BestLoss}}
		s, err := plotter.NewScatter(best)
		if err == nil {
			s.GlyphStyle.Radius = vg.Points(4)
			p.Add(s)
			p.Legend.Add("best epoch", s)
		}
	}
	p.Legend.Top = true
	p.Add(plotter.NewGrid())
	return save(p, path)
}

// ScoreHistogram plots the distribution of anomaly scores with the
// threshold as a vertical line; positive, when given, splits the bars into
// known-normal and known-anomalous rows.
func ScoreHistogram(path string, scores []float64, threshold float64, positive []bool) error {
	if len(scores) == 0 {
		return fmt.Errorf("report: no scores to plot")
	}
	p := plot.New()
	p.Title.Text = "Anomaly scores"
	p.X.Label.Text = "score (log10 of reconstruction error)"
	p.Y.Label.Text = "rows"
	lg := func(v float64) float64 { return math.Log10(math.Max(v, 1e-12)) }
	split := func(want bool) plotter.Values {
		var v plotter.Values
		for i, s := range scores {
			if positive == nil || positive[i] == want {
				v = append(v, lg(s))
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
	for i, g := range groups {
		if len(g.vals) == 0 {
			continue
		}
		h, err := plotter.NewHist(g.vals, 40)
		if err != nil {
			return err
		}
		c := palette[i]
		h.FillColor = color.NRGBA{c.R, c.G, c.B, 150}
		h.LineStyle.Width = 0
		p.Add(h)
		p.Legend.Add(g.name, h)
	}
	ymax := p.Y.Max
	line, err := plotter.NewLine(plotter.XYs{{X: lg(threshold), Y: 0}, {X: lg(threshold), Y: ymax}})
	if err != nil {
		return err
	}
	line.Color = color.RGBA{0, 0, 0, 255}
	line.Width = vg.Points(2)
	line.Dashes = []vg.Length{vg.Points(6), vg.Points(3)}
	p.Add(line)
	p.Legend.Add("threshold", line)
	p.Legend.Top = true
	return save(p, path)
}

// LatentScatter plots 2-D codes (rows x 2), coloured by label when labels
// is not nil.
func LatentScatter(path string, codes []float32, labels []int, names []string) error {
	n := len(codes) / 2
	if n == 0 {
		return fmt.Errorf("report: no codes to plot")
	}
	p := plot.New()
	p.Title.Text = "Latent space"
	p.X.Label.Text = "z0"
	p.Y.Label.Text = "z1"
	groups := map[int]plotter.XYs{}
	for i := 0; i < n; i++ {
		l := 0
		if labels != nil {
			l = labels[i]
		}
		groups[l] = append(groups[l], plotter.XY{X: float64(codes[2*i]), Y: float64(codes[2*i+1])})
	}
	keys := make([]int, 0, len(groups))
	for k := range groups {
		keys = append(keys, k)
	}
	sort.Ints(keys)
	for _, k := range keys {
		s, err := plotter.NewScatter(groups[k])
		if err != nil {
			return err
		}
		s.GlyphStyle.Color = palette[(k+len(palette))%len(palette)]
		s.GlyphStyle.Radius = vg.Points(1.5)
		p.Add(s)
		if labels != nil {
			name := fmt.Sprintf("class %d", k)
			if k >= 0 && k < len(names) {
				name = names[k]
			} else if k < 0 {
				name = "unlabelled"
			}
			p.Legend.Add(name, s)
		}
	}
	p.Legend.Top = true
	return save(p, path)
}

// ImageGrid writes rows of image values in [0, 1] (h x w x c each) as one
// PNG grid with cols images per row, each scaled up by zoom.
func ImageGrid(path string, rows []float32, h, w, c, cols, zoom int) error {
	size := h * w * c
	if size == 0 || len(rows)%size != 0 || (c != 1 && c != 3) {
		return fmt.Errorf("report: %d values are not images of %dx%dx%d", len(rows), h, w, c)
	}
	n := len(rows) / size
	cols = max(1, min(cols, n))
	zoom = max(zoom, 1)
	gridRows := (n + cols - 1) / cols
	pad := 2
	img := image.NewRGBA(image.Rect(0, 0, cols*(w*zoom+pad)+pad, gridRows*(h*zoom+pad)+pad))
	for i := range img.Pix {
		img.Pix[i] = 255
	}
	q := func(v float32) uint8 {
		if !(v > 0) {
			return 0
		}
		if v >= 1 {
			return 255
		}
		return uint8(v*255 + 0.5)
	}
	for k := 0; k < n; k++ {
		ox, oy := pad+(k%cols)*(w*zoom+pad), pad+(k/cols)*(h*zoom+pad)
		im := rows[k*size : (k+1)*size]
		for y := 0; y < h; y++ {
			for x := 0; x < w; x++ {
				var col color.RGBA
				if c == 1 {
					g := q(im[y*w+x])
					col = color.RGBA{g, g, g, 255}
				} else {
					b := (y*w + x) * 3
					col = color.RGBA{q(im[b]), q(im[b+1]), q(im[b+2]), 255}
				}
				for dy := 0; dy < zoom; dy++ {
					for dx := 0; dx < zoom; dx++ {
						img.SetRGBA(ox+x*zoom+dx, oy+y*zoom+dy, col)
					}
				}
			}
		}
	}
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if err := png.Encode(f, img); err != nil {
		f.Close()
		return fmt.Errorf("report: %w", err)
	}
	return f.Close()
}

// Figure is one image on the HTML page.
type Figure struct {
	File    string // relative to the page
	Caption string
}

// Setting is one row of the page's settings table.
type Setting struct{ Name, Value string }

var page = template.Must(template.New("page").Parse(`<!doctype html>
<html><head><meta charset="utf-8"><title>{{.Title}}</title>
<style>
body{font-family:system-ui,sans-serif;max-width:1000px;margin:2em auto;color:#222}
table{border-collapse:collapse}td{padding:2px 12px;border-bottom:1px solid #ddd}
figure{margin:1.5em 0}img{max-width:100%;border:1px solid #eee}
.caution{background:#fff4e5;border-left:4px solid #f0a020;padding:.6em 1em}
</style></head><body>
<h1>{{.Title}}</h1>
{{if .Caution}}<p class="caution">{{.Caution}}</p>{{end}}
{{range .Paragraphs}}<p>{{.}}</p>{{end}}
<h2>Settings</h2>
<table>{{range .Settings}}<tr><td>{{.Name}}</td><td>{{.Value}}</td></tr>{{end}}</table>
{{range .Figures}}<figure><img src="{{.File}}" alt="{{.Caption}}"><figcaption>{{.Caption}}</figcaption></figure>{{end}}
</body></html>
`))

// Page is the HTML report tying figures and settings together.
type Page struct {
	Title      string
	Caution    string
	Paragraphs []string
	Settings   []Setting
	Figures    []Figure
}

// Write renders the page to dir/index.html.
func (pg Page) Write(dir string) error {
	f, err := os.Create(filepath.Join(dir, "index.html"))
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if err := page.Execute(f, pg); err != nil {
		f.Close()
		return fmt.Errorf("report: %w", err)
	}
	return f.Close()
}

func sameSeries(h *train.History, a, b int) bool {
	for _, r := range h.Epochs {
		if r.Train[a].Value != r.Train[b].Value {
			return false
		}
	}
	return true
}

// FirstTwo keeps the first two columns of rows of width w (a zero second
// column when w is 1), for LatentScatter.
func FirstTwo(x []float32, rows, w int) []float32 {
	out := make([]float32, 0, 2*rows)
	for r := 0; r < rows; r++ {
		a, b := x[r*w], float32(0)
		if w > 1 {
			b = x[r*w+1]
		}
		out = append(out, a, b)
	}
	return out
}
