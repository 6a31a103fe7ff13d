package main

import (
	"bytes"
	"encoding/csv"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"github.com/quernlab/quern/anomaly"
	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/stat/distuv"
)

// panelTask is one novelty task of scripts/panel/panel.py: the normal
// class's even-indexed rows train; its odd-indexed rows and every other
// class's rows are scored, truth=1 for the other classes.
type panelTask struct {
	name, set         string
	train, test       [][]string
	truth             []bool
	pca3, pca90, zdis float64
}

// sklearnRows reads one of scikit-learn's CSV files: a first line of counts
// and class names, then rows with the integer class last.
func sklearnRows(t *testing.T, path string) (x [][]string, class []string) {
	f, err := os.Open(path)
	require.NoError(t, err)
	defer f.Close()
	cr := csv.NewReader(f)
	cr.FieldsPerRecord = -1 // the first line is not a row
	rows, err := cr.ReadAll()
	require.NoError(t, err)
	for _, r := range rows[1:] {
		x = append(x, r[:len(r)-1])
		class = append(class, r[len(r)-1])
	}
	return x, class
}

// panelTasks rebuilds the tasks of testdata/panel/tasks.csv from the
// sklearn files and attaches the numpy baselines of baselines.csv.
func panelTasks(t *testing.T) []panelTask {
	read := func(p string) [][]string {
		f, err := os.Open(p)
		require.NoError(t, err)
		defer f.Close()
		r, err := csv.NewReader(f).ReadAll()
		require.NoError(t, err)
		return r[1:]
	}
	base := map[string][]float64{}
	for _, r := range read("../../testdata/panel/baselines.csv") {
		var v []float64
		for _, s := range []string{r[1], r[2], r[4]} {
			f, err := strconv.ParseFloat(s, 64)
			require.NoError(t, err)
			v = append(v, f)
		}
		base[r[0]] = v
	}
	files := map[string]string{"breast_cancer": "breast_cancer.csv", "wine": "wine_data.csv"}
	var tasks []panelTask
	for _, r := range read("../../testdata/panel/tasks.csv") {
		x, class := sklearnRows(t, filepath.Join("../../testdata/sklearn", files[r[1]]))
		tk := panelTask{name: r[0], set: r[1]}
		var held, other [][]string
		n := 0
		for i, c := range class {
			switch {
			case c != r[2]:
				other = append(other, x[i])
			case n%2 == 0:
				tk.train = append(tk.train, x[i])
				n++
			default:
				held = append(held, x[i])
				n++
			}
		}
		tk.test = append(held, other...)
		for i := range tk.test {
			tk.truth = append(tk.truth, i >= len(held))
		}
		require.Equal(t, r[3], strconv.Itoa(len(tk.train)), "%s: the script's training rows", tk.name)
		require.Equal(t, r[4], strconv.Itoa(len(tk.test)), "%s: the script's scored rows", tk.name)
		b := base[tk.name]
		tk.pca3, tk.pca90, tk.zdis = b[0], b[1], b[2]
		tasks = append(tasks, tk)
	}
	return tasks
}

func writePanelCSV(t *testing.T, path string, rows [][]string, truth []bool) {
	var b bytes.Buffer
	w := csv.NewWriter(&b)
	head := make([]string, len(rows[0]))
	for j := range head {
		head[j] = fmt.Sprintf("f%d", j+1)
	}
	if truth != nil {
		head = append(head, "truth")
	}
	require.NoError(t, w.Write(head))
	for i, r := range rows {
		if truth != nil {
			r = append(append([]string(nil), r...), map[bool]string{false: "0", true: "1"}[truth[i]])
		}
		require.NoError(t, w.Write(r))
	}
	w.Flush()
	require.NoError(t, os.WriteFile(path, b.Bytes(), 0o644))
}

var boundRE = regexp.MustCompile(`below ([0-9.]+)% with`)

// TestPanelAtDefaults is the fast part of the open panel (bench/panel.sh
// runs all of it): on the breast cancer and wine tasks, quern at its
// defaults must reach each baseline's AUC less 0.005 on each set's mean
// (the target), and on every task the held-out normal rows
// flagged must be consistent with the threshold's reported false-alarm
// bound: no more than the 99% quantile of a binomial count at the bound
// (the achieved rate on a few hundred rows is itself a noisy measurement).
func TestPanelAtDefaults(t *testing.T) {
	dir := t.TempDir()
	type agg struct{ quern, pca3, pca90, zdis float64 }
	sets := map[string]*agg{}
	count := map[string]float64{}
	for _, tk := range panelTasks(t) {
		trainCSV, testCSV := filepath.Join(dir, tk.name+"-train.csv"), filepath.Join(dir, tk.name+"-test.csv")
		writePanelCSV(t, trainCSV, tk.train, nil)
		writePanelCSV(t, testCSV, tk.test, tk.truth)
		mp := filepath.Join(dir, tk.name+".qm")
		ok(t, quern(t, dir, nil, "train", "-data", trainCSV, "-out", mp, "-quiet"))
		sp := filepath.Join(dir, tk.name+"-scores.csv")
		ok(t, quern(t, dir, nil, "score", "-model", mp, "-data", testCSV, "-keep", "truth", "-top", "0", "-out", sp, "-quiet"))
		f, err := os.Open(sp)
		require.NoError(t, err)
		rows, err := csv.NewReader(f).ReadAll()
		f.Close()
		require.NoError(t, err)
		col := map[string]int{}
		for j, h := range rows[0] {
			col[h] = j
		}
		var scores []float64
		var positive []bool
		flagged, normal := 0, 0
		for _, r := range rows[1:] {
			s, err := strconv.ParseFloat(r[col["score"]], 64)
			require.NoError(t, err)
			scores = append(scores, s)
			p := r[col["truth"]] == "1"
			positive = append(positive, p)
			if !p {
				normal++
				if r[col["anomaly"]] == "true" {
					flagged++
				}
			}
		}
		auc, err := anomaly.ROCAUC(scores, positive)
		require.NoError(t, err)
		ins := ok(t, quern(t, dir, nil, "inspect", mp)).stdout
		m := boundRE.FindStringSubmatch(ins)
		require.NotNil(t, m, "inspect shows the false-alarm bound: %s", ins)
		bound, err := strconv.ParseFloat(m[1], 64)
		require.NoError(t, err)
		limit := binomialQuantile(normal, bound/100, 0.99)
		t.Logf("%s: AUC %.4f (pca3 %.4f, pca90 %.4f, z-distance %.4f); %d of %d held-out normal rows flagged, bound %.2f%%", tk.name, auc, tk.pca3, tk.pca90, tk.zdis, flagged, normal, bound)
		require.LessOrEqual(t, float64(flagged), limit, "%s: false alarms against the reported bound", tk.name)
		a := sets[tk.set]
		if a == nil {
			a = &agg{}
			sets[tk.set] = a
		}
		a.quern += auc
		a.pca3 += tk.pca3
		a.pca90 += tk.pca90
		a.zdis += tk.zdis
		count[tk.set]++
	}
	for name, a := range sets {
		n := count[name]
		for what, b := range map[string]float64{"PCA k=3": a.pca3, "PCA 90%": a.pca90, "z-distance": a.zdis} {
			require.GreaterOrEqual(t, a.quern/n, b/n-0.005, "%s: quern's mean AUC against %s", name, what)
		}
	}
}

// Cross-fitting runs its folds side by side; the model is the same bit
// for bit at one thread and at two.
func TestCrossFitThreadCount(t *testing.T) {
	dir := t.TempDir()
	tk := panelTasks(t)[1] // wine, class 0
	trainCSV := filepath.Join(dir, "train.csv")
	writePanelCSV(t, trainCSV, tk.train, nil)
	var files [][]byte
	for _, th := range []string{"1", "2"} {
		out := filepath.Join(dir, "m"+th+".qm")
		r := ok(t, quern(t, dir, []string{"GOMAXPROCS=" + th}, "train", "-data", trainCSV, "-out", out))
		require.Contains(t, r.stderr, "cross-fitted over 5 folds")
		b, err := os.ReadFile(out)
		require.NoError(t, err)
		files = append(files, b)
	}
	require.True(t, bytes.Equal(files[0], files[1]), "models at 1 and 2 threads differ")
	require.True(t, strings.Contains(string(files[0]), "cross_fit"))
}

// binomialQuantile is the smallest count c with P(Binomial(n, p) <= c) >= q.
func binomialQuantile(n int, p, q float64) float64 {
	b := distuv.Binomial{N: float64(n), P: p}
	for c := 0; c < n; c++ {
		if b.CDF(float64(c)) >= q {
			return float64(c)
		}
	}
	return float64(n)
}
