package testenv

import (
	"path/filepath"
	"runtime"
	"testing"

	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/modelfile"
	"github.com/stretchr/testify/require"
)

// Root is the repository's root folder.
var Root = func() string {
	_, file, _, _ := runtime.Caller(0)
	return filepath.Join(filepath.Dir(file), "..", "..")
}()

// Testdata is the path of a file under testdata.
func Testdata(parts ...string) string {
	return filepath.Join(append([]string{Root, "testdata"}, parts...)...)
}

// BreastCancer is testdata/sklearn/breast_cancer.csv: 569 rows of 30
// columns, labels 0 (malignant) and 1 (benign).
func BreastCancer(t testing.TB) *data.Dataset {
	t.Helper()
	d, err := data.LoadCSV(Testdata("sklearn", "breast_cancer.csv"), data.CSVConfig{NoHeader: true, SkipLines: 1, Label: "c30"})
	require.NoError(t, err)
	return d
}

// Digits is testdata/sklearn/digits.csv.gz: 1797 rows of 64 grey levels
// 0-16, labels 0-9.
func Digits(t testing.TB) *data.Dataset {
	t.Helper()
	d, err := data.LoadCSV(Testdata("sklearn", "digits.csv.gz"), data.CSVConfig{NoHeader: true, Label: "c64"})
	require.NoError(t, err)
	return d
}

// Fashion is the committed Fashion-MNIST subset: "train" (2000 images) or
// "t10k" (500), with labels.
func Fashion(t testing.TB, set string) *data.Dataset {
	t.Helper()
	n := "2000"
	if set == "t10k" {
		n = "500"
	}
	dir := Testdata("fashion-mnist")
	d, err := data.LoadIDX(filepath.Join(dir, set+"-images-idx3-ubyte-first"+n+".gz"), data.IDXConfig{Labels: filepath.Join(dir, set+"-labels-idx1-ubyte-first"+n+".gz")})
	require.NoError(t, err)
	return d
}

// Compat reads testdata/compat/NAME (a model file or checkpoint written
// before the architecture change).
func Compat(t testing.TB, name string) *modelfile.File {
	t.Helper()
	f, err := modelfile.Read(Testdata("compat", name), 0)
	require.NoError(t, err)
	return f
}
