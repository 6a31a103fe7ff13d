package report

import (
	"image/png"
	"os"
	"path/filepath"
	"testing"

	"github.com/quernlab/quern/train"
	"github.com/stretchr/testify/require"
)

func decode(t *testing.T, path string) (w, h int) {
	f, err := os.Open(path)
	require.NoError(t, err)
	defer f.Close()
	img, err := png.Decode(f)
	require.NoError(t, err)
	b := img.Bounds()
	return b.Dx(), b.Dy()
}

func TestFiguresAreValidPNGs(t *testing.T) {
	dir := t.TempDir()
	h := &train.History{BestEpoch: 2, BestLoss: 1}
	for _, v := range []float64{3, 1, 2} {
		h.Epochs = append(h.Epochs, train.EpochRecord{Train: []train.Metric{{Name: "loss", Value: v}, {Name: "kl", Value: v / 2}}})
	}
	require.NoError(t, LossCurves(filepath.Join(dir, "l.png"), h, CurveOptions{}))
	w, _ := decode(t, filepath.Join(dir, "l.png"))
	require.Greater(t, w, 300)
	require.NoError(t, ScoreHistogram(filepath.Join(dir, "s.png"), []float64{0.1, 0.2, 5, 0.15}, 1, []bool{false, false, true, false}, ""))
	require.NoError(t, LatentScatter(filepath.Join(dir, "z.png"), []float32{0, 1, 1, 0, 2, 2}, []int{0, 1, -1}, []string{"a", "b"}))
	// 3 grey 2x2 images, 2 per row, zoom 2, 2-pixel padding:
	// width 2*(4+2)+2 = 14, height 2*(4+2)+2 = 14
	require.NoError(t, ImageGrid(filepath.Join(dir, "g.png"), make([]float32, 12), 2, 2, 1, 2, 2))
	w, hh := decode(t, filepath.Join(dir, "g.png"))
	require.Equal(t, 14, w)
	require.Equal(t, 14, hh)
	require.Error(t, ImageGrid(filepath.Join(dir, "bad.png"), make([]float32, 5), 2, 2, 1, 2, 2))
	require.Error(t, LossCurves(filepath.Join(dir, "e.png"), &train.History{}, CurveOptions{}))
	require.Error(t, ScoreHistogram(filepath.Join(dir, "e.png"), nil, 1, nil, ""))
	require.NoError(t, Page{Title: "t <b>", Settings: []Setting{{Name: "a", Value: "b"}}}.Write(dir))
	b, err := os.ReadFile(filepath.Join(dir, "index.html"))
	require.NoError(t, err)
	require.Contains(t, string(b), "t &lt;b&gt;", "titles are escaped")
}
