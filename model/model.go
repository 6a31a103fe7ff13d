package model

import (
	"fmt"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/gan"
	"github.com/quernlab/quern/internal/modelio"
	"github.com/quernlab/quern/layers"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/vae"
)

// Model is what every model offers.
type Model interface {
	// Kind names the kind: "ae", "vae" or "gan".
	Kind() string
	// Width is the number of values in a row the model reads (and, for a
	// generative model, writes).
	Width() int
	// Schema names the columns and, for images, their shape.
	Schema() data.Schema
	// Params lists every parameter.
	Params() []*layers.Param
	// Networks lists the model's networks.
	Networks() []*layers.MLP
	// File converts the model back to a model file with the given
	// provenance (may be nil).
	File(prov *modelfile.Provenance) (*modelfile.File, error)
}

// Scorer scores rows for anomalies against a calibrated threshold.
type Scorer interface {
	// RowScores returns each raw row's score (higher: less like the
	// training data).
	RowScores(x []float32, rows int) ([]float64, error)
	// Score assesses rows against the threshold, naming the top columns
	// (at most top) behind each score; it fails without a threshold.
	Score(x []float32, rows, top int) ([]anomaly.Score, error)
	// Calibrated is the threshold, nil before calibration.
	Calibrated() *anomaly.Threshold
}

// ScoreNamer names what a Scorer's RowScores measure, for captions and
// axis labels ("distance score", "reconstruction error").
type ScoreNamer interface {
	ScoreName() string
}

// Explainer returns, for each row and each value the model reads, that
// value's part in the row's score (rows x Width; larger: more unlike the
// training data): per pixel for images.
type Explainer interface {
	Contributions(x []float32, rows int) ([]float64, error)
	// Departures is Contributions less what each value would cost if the
	// model gave it back exactly (a grey level's entropy under a
	// Bernoulli likelihood): what a heat map shows.
	Departures(x []float32, rows int) ([]float64, error)
}

// Profiler fits what a Scorer's score knows of normal rows beyond the
// weights (ae.Profile) to the training rows; Calibrate after it. A model
// whose score takes no profile returns an error wrapping
// anomaly.ErrNoProfile. Like Calibrate it changes the model.
type Profiler interface {
	FitProfile(x []float32, rows int) error
}

// Calibrator sets a Scorer's threshold from held-out normal rows. It
// changes the model: unlike the other capabilities, it must not run while
// other goroutines use the model.
type Calibrator interface {
	Calibrate(normal []float32, rows int, c anomaly.Config) (anomaly.Threshold, error)
}

// Encoder maps rows to codes of CodeWidth values.
type Encoder interface {
	Encode(x []float32, rows int) ([]float32, error)
	CodeWidth() int
}

// Decoder maps codes back to rows.
type Decoder interface {
	Decode(z []float32, rows int) ([]float32, error)
	CodeWidth() int
}

// Reconstructor returns the model's reconstruction of rows.
type Reconstructor interface {
	Reconstruct(x []float32, rows int) ([]float32, error)
}

// Sampler draws n new rows; the same seed gives the same rows.
type Sampler interface {
	Sample(n int, seed uint64) ([]float32, error)
}

// ClassSampler draws n new rows of one class (0..Classes()-1, or -1 for
// classes drawn at random). Every GAN has the method; only one trained
// with classes (Classes() > 0) can be asked for a class.
type ClassSampler interface {
	Classes() int
	Generate(n int, seed uint64, class int) ([]float32, error)
}

// Classifier returns the most likely class of each row and the class
// probabilities (rows x Classes()); a model with Classes() 0 has no
// classifier to ask.
type Classifier interface {
	Classes() int
	Classify(x []float32, rows int) ([]int, []float64, error)
}

// Interpolator decodes steps points on a path between two rows' codes.
type Interpolator interface {
	Interpolate(a, b []float32, steps int, path vae.Path) ([]float32, error)
}

// Density bounds each row's log-likelihood from below: the ELBO, and the
// importance-weighted bound with k samples.
type Density interface {
	ELBO(x []float32, rows, samples int, seed uint64) ([]float64, error)
	IWAE(x []float32, rows, k int, seed uint64) ([]float64, error)
}

// Open reads a model file (a checkpoint also opens, as the model it
// holds) and returns its model.
func Open(path string) (Model, error) {
	return modelio.Open(path, FromFile)
}

// Decode returns the model of a model file's bytes (path names it in
// errors): Open for a file already read.
func Decode(b []byte, path string) (Model, error) {
	f, err := modelfile.Decode(b, path)
	if err != nil {
		return nil, err
	}
	m, err := FromFile(f)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return m, nil
}

// FromFile returns the model a model file holds.
func FromFile(f *modelfile.File) (Model, error) {
	var m Model
	var err error
	switch f.Kind {
	case ae.Kind:
		m, err = nonNil(ae.FromFile(f))
	case vae.Kind:
		m, err = nonNil(vae.FromFile(f))
	case gan.Kind:
		m, err = nonNil(gan.FromFile(f))
	default:
		err = fmt.Errorf("model: unknown model kind %q (this build knows %v)", f.Kind, Kinds())
	}
	return m, err
}

// nonNil keeps a failed load's nil pointer out of the interface.
func nonNil[M Model](m M, err error) (Model, error) {
	if err != nil {
		return nil, err
	}
	return m, nil
}

// Kinds lists the kinds FromFile opens.
func Kinds() []string { return []string{ae.Kind, vae.Kind, gan.Kind} }
