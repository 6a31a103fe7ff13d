package report

import (
	"fmt"
	"image/color"
	"math"
	"os"
	"strconv"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// Palette is the colour-blind-safe palette of Okabe and Ito ("Color
// Universal Design", 2008) without its yellow, which vanishes on white:
// black, orange, sky blue, bluish green, blue, vermillion, reddish purple.
// Series and classes take its colours in this order; past seven, the
// marker shape changes too.
var Palette = []color.RGBA{
	{0, 0, 0, 255}, {230, 159, 0, 255}, {86, 180, 233, 255}, {0, 158, 115, 255},
	{0, 114, 178, 255}, {213, 94, 0, 255}, {204, 121, 167, 255},
}

// shapes tell classes apart beyond the palette's colours.
var shapes = []draw.GlyphDrawer{draw.CircleGlyph{}, draw.TriangleGlyph{}, draw.BoxGlyph{}, draw.CrossGlyph{}, draw.PlusGlyph{}, draw.RingGlyph{}}

func colourOf(k int) color.RGBA { return Palette[((k%len(Palette))+len(Palette))%len(Palette)] }

func shapeOf(k int) draw.GlyphDrawer {
	if k < 0 {
		return draw.RingGlyph{}
	}
	return shapes[(k/len(Palette))%len(shapes)]
}

// Figure sizes: wide enough for a page at full width, type at 11 pt.
const (
	figWidth    = 10 * vg.Inch
	panelHeight = 3.2 * vg.Inch
	fontSize    = 11
)

// panel is one plot with its legend drawn beside it, off the data.
type panel struct {
	p      *plot.Plot
	legend plot.Legend
	n      int      // legend entries
	names  []string // their texts
}

func newPanel(title, x, y string) *panel {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font.Size = fontSize + 2
	p.X.Label.Text, p.Y.Label.Text = x, y
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font.Size = fontSize
		a.Tick.Label.Font.Size = fontSize - 1
	}
	p.X.Tick.Marker, p.Y.Tick.Marker = readableTicks{}, readableTicks{}
	g := plotter.NewGrid()
	g.Vertical.Color = color.Gray{230}
	g.Horizontal.Color = color.Gray{230}
	p.Add(g)
	l := plot.NewLegend()
	l.TextStyle.Font.Size = fontSize
	l.Top, l.Left = true, true
	l.Padding = vg.Points(3)
	return &panel{p: p, legend: l}
}

func (pn *panel) add(name string, thumbs ...plot.Thumbnailer) {
	pn.legend.Add(name, thumbs...)
	pn.n++
	pn.names = append(pn.names, name)
}

// pad widens an axis by a fraction of its span on both sides, so that
// markers at the ends stay inside the frame.
func pad(a *plot.Axis, frac float64) {
	span := a.Max - a.Min
	if span <= 0 || math.IsInf(span, 0) || math.IsNaN(span) {
		span = math.Max(math.Abs(a.Max), 1)
	}
	a.Min -= frac * span
	a.Max += frac * span
}

// savePanels stacks panels in a grid of cols columns, each with its
// legend on its right, and writes the PNG.
func savePanels(path string, panels []*panel, cols int) error {
	cols = max(1, min(cols, len(panels)))
	var rows [][]*panel
	for i := 0; i < len(panels); i += cols {
		rows = append(rows, panels[i:min(len(panels), i+cols)])
	}
	return saveRows(path, rows)
}

// saveRows draws rows of panels, each row's panels side by side at equal
// width (a panel's legend on its right, off the data), and writes the PNG.
func saveRows(path string, rows [][]*panel) error {
	if len(rows) == 0 || len(rows[0]) == 0 {
		return fmt.Errorf("report: %s: nothing to draw", path)
	}
	h := panelHeight * vg.Length(len(rows))
	img := vgimg.NewWith(vgimg.UseWH(figWidth, h), vgimg.UseDPI(96), vgimg.UseBackgroundColor(color.White))
	dc := draw.New(img)
	band := draw.Tiles{Rows: len(rows), Cols: 1, PadY: vg.Points(10), PadTop: vg.Points(6), PadBottom: vg.Points(6), PadLeft: vg.Points(6), PadRight: vg.Points(6)}
	for r, row := range rows {
		rc := band.At(dc, 0, r)
		tiles := draw.Tiles{Rows: 1, Cols: len(row), PadX: vg.Points(14)}
		for i, pn := range row {
			c := tiles.At(rc, i, 0)
			lw := pn.legendWidth(c.Max.X - c.Min.X)
			pn.p.Draw(draw.Crop(c, 0, -lw, 0, 0))
			if pn.n > 0 {
				pn.legend.Draw(draw.Crop(c, c.Max.X-c.Min.X-lw+vg.Points(8), 0, 0, -vg.Points(24)))
			}
		}
	}
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if _, err := (vgimg.PngCanvas{Canvas: img}).WriteTo(f); err != nil {
		f.Close()
		return fmt.Errorf("report: %s: %w", path, err)
	}
	return f.Close()
}

// legendWidth is the width the panel's legend needs, at most 40% of the
// tile's width w (zero without a legend).
func (pn *panel) legendWidth(w vg.Length) vg.Length {
	if pn.n == 0 {
		return 0
	}
	var text vg.Length
	for _, n := range pn.names {
		text = max(text, pn.legend.TextStyle.Width(n))
	}
	em := pn.legend.TextStyle.Width("M")
	return min(text+pn.legend.ThumbnailWidth+2*em, 0.4*w)
}

// integerTicks marks whole numbers only (epochs), about eight of them.
type integerTicks struct{}

func (integerTicks) Ticks(lo, hi float64) []plot.Tick {
	a, b := math.Ceil(lo), math.Floor(hi)
	if b < a {
		return nil
	}
	step := 1.0
	for _, s := range []float64{1, 2, 5, 10, 20, 25, 50, 100, 200, 250, 500, 1000, 2000, 5000, 10000} {
		step = s
		if (b-a)/s <= 8 {
			break
		}
	}
	var t []plot.Tick
	for v := math.Ceil(a/step) * step; v <= b; v += step {
		if v < 1 {
			continue
		}
		t = append(t, plot.Tick{Value: v, Label: fmt.Sprintf("%.0f", v)})
	}
	return t
}

// logWorthy reports whether values span more than a decade and a half and
// are all positive: such a series reads better on a log axis.
func logWorthy(vs ...[]float64) bool {
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, v := range vs {
		for _, x := range v {
			if !(x > 0) || math.IsInf(x, 0) {
				return false
			}
			lo, hi = math.Min(lo, x), math.Max(hi, x)
		}
	}
	return hi/lo > 30
}

// readableTicks are gonum's default ticks labelled with enough digits to
// tell neighbours apart (the default can print 1.1 twice).
type readableTicks struct{}

func (readableTicks) Ticks(lo, hi float64) []plot.Tick {
	t := plot.DefaultTicks{}.Ticks(lo, hi)
	short := true
	for i := range t {
		if t[i].Label == "" {
			continue
		}
		l := strconv.FormatFloat(t[i].Value, 'f', -1, 64)
		short = short && len(l) <= 7
		t[i].Label = l
	}
	if short {
		return t
	}
	for prec := 2; prec <= 8; prec++ {
		seen := map[string]bool{}
		clash := false
		for i := range t {
			if t[i].Label == "" {
				continue
			}
			t[i].Label = strconv.FormatFloat(t[i].Value, 'g', prec, 64)
			clash = clash || seen[t[i].Label]
			seen[t[i].Label] = true
		}
		if !clash {
			break
		}
	}
	return t
}
