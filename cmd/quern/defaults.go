package main

import (
	"fmt"

	"github.com/quernlab/quern/ae"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/vae"
)

// The training defaults a user gets without flags, chosen from the data
// (see chooseDefaults). Tuned on the open panel (bench/panel.sh).
const (
	// codeVariance is the share of the scaled rows' variance the default
	// code width keeps: the fewest principal components explaining it.
	codeVariance = 0.9
	// maxDefaultCode caps the default code width.
	maxDefaultCode = 64
	// hiddenPerInput, minDefaultHidden and maxDefaultHidden give the
	// default hidden width: hiddenPerInput per input column, within the
	// two bounds, rounded up to a multiple of 8.
	hiddenPerInput   = 2
	minDefaultHidden = 16
	maxDefaultHidden = 256
	// weightsPerRow caps the default hidden width further so that the
	// network has at most about this many weights per training row: on
	// small tables a wider network learns the rows themselves.
	weightsPerRow = 4
	// budgetSteps is the default run's length in optimiser steps (rounded
	// up to whole epochs, at least minBudgetEpochs); patienceSteps the
	// steps without a validation improvement after which it stops (at
	// least minPatienceEpochs epochs).
	budgetSteps       = 10000
	minBudgetEpochs   = 3
	patienceSteps     = 1000
	minPatienceEpochs = 2
	// gan runs, which have no validation loss to stop on, keep a fixed
	// length
	defaultGANEpochs = 20
)

// chooseDefaults fills in what the user left unset (set holds the flags
// given) from the data: for autoencoders and VAEs the code width from the
// data's spectrum, the hidden width from the input width, and the
// training length in steps with early stopping on the validation rows. It
// returns one line per choice, saying what was chosen and why. rows is
// the number of rows a model trains on (a fold model's when
// cross-fitting), and rowsWhat names them for those lines.
func (o *trainOpts) chooseDefaults(d *data.Dataset, rows int, rowsWhat string, set map[string]bool) ([]string, error) {
	var why []string
	coded := o.kind == ae.Kind || o.kind == vae.Kind
	if coded && !set["latent"] {
		kind := data.ScaleKind(o.scaling)
		if kind == "" {
			kind = data.ScaleStandard
			if d.Image != nil {
				kind = data.ScaleNone
			}
		}
		capAt := min(max(d.Cols-1, 1), maxDefaultCode)
		var reason string
		switch {
		case d.Rows < 2:
			// a single row has no spectrum (and is warned about)
			o.latent = 1
			reason = "a single row has no spectrum to choose from"
		case d.Cols > data.SpectrumColumns:
			// the spectrum of a very wide table costs more than the
			// training; such tables get the cap
			o.latent = capAt
			reason = fmt.Sprintf("the largest default: %d columns are too many to measure the spectrum of (more than %d)", d.Cols, data.SpectrumColumns)
		default:
			ev, err := data.Spectrum(d, kind)
			if err != nil {
				return nil, fmt.Errorf("choosing the code width (give -latent): %w", err)
			}
			k := data.ComponentsFor(ev, codeVariance)
			o.latent = min(max(k, 1), capAt)
			verb := "explain"
			if k == 1 {
				verb = "explains"
			}
			reason = fmt.Sprintf("%s %s %.0f%% of the variance of the rows (%s scaling)", plural(k, "principal component"), verb, 100*codeVariance, kind)
			if k > capAt {
				reason += fmt.Sprintf(", capped at %d", capAt)
			}
			if k < 1 {
				reason = fmt.Sprintf("the rows have no variance (%s scaling), so the narrowest code", kind)
			}
		}
		if !set["hidden"] && o.channels == "" {
			// a network no wider than its code within weightsPerRow
			// parameters per row
			most := 1
			for l := 2; aeParams(d.Cols, l, l) <= weightsPerRow*rows; l++ {
				most = l
			}
			if o.latent > most {
				o.latent = most
				reason += fmt.Sprintf(", narrowed to %d to keep about %d weights per training row (%d %s)", most, weightsPerRow, rows, rowsWhat)
			}
		}
		why = append(why, fmt.Sprintf("code width %d: %s (-latent sets it)", o.latent, reason))
	}
	if coded && !set["hidden"] && o.channels != "" {
		// the convolutions' feature maps go straight to the code, and
		// back
		o.hidden = "none"
		why = append(why, "hidden layers: none, the convolutions' innermost maps meet the code directly (-hidden adds dense layers between them)")
	}
	if coded && !set["hidden"] && o.channels == "" {
		h := min(max(hiddenPerInput*d.Cols, minDefaultHidden, 2*o.latent), maxDefaultHidden)
		h = (h + 7) / 8 * 8
		line := fmt.Sprintf("%d per input column, between %d and %d, rounded up to a multiple of 8", hiddenPerInput, minDefaultHidden, maxDefaultHidden)
		fit := 0
		for fit < h && aeParams(d.Cols, fit+1, o.latent) <= weightsPerRow*rows {
			fit++
		}
		if fit < h {
			h = max(fit, o.latent, 1)
			line = fmt.Sprintf("at most about %d weights per training row (%d %s)", weightsPerRow, rows, rowsWhat)
		}
		o.hidden = fmt.Sprint(h)
		why = append(why, fmt.Sprintf("hidden width %d: %s (-hidden sets it)", h, line))
	}
	if !set["epochs"] {
		switch {
		case coded && o.val > 0:
			batches := max(1, (rows+o.batch-1)/o.batch)
			o.epochs = max((budgetSteps+batches-1)/batches, minBudgetEpochs)
			line := fmt.Sprintf("length: up to %d epochs of %d steps (about %d steps)", o.epochs, batches, o.epochs*batches)
			if !set["patience"] {
				o.patience = max((patienceSteps+batches-1)/batches, minPatienceEpochs)
				line += fmt.Sprintf(", stopping after %d epochs without a better validation loss and keeping the best epoch's weights", o.patience)
			}
			why = append(why, line+" (-epochs and -patience set them)")
		case coded:
			// no validation rows to stop on: the whole budget
			batches := max(1, (rows+o.batch-1)/o.batch)
			o.epochs = max((budgetSteps+batches-1)/batches, minBudgetEpochs)
			why = append(why, fmt.Sprintf("length: %d epochs of %d steps (about %d steps), without early stopping: there are no validation rows to stop on (-val 0) (-epochs sets it)", o.epochs, batches, o.epochs*batches))
		default:
			o.epochs = defaultGANEpochs
		}
	}
	return why, nil
}

// plural counts n of a noun: "1 row", "2 rows" (nouns that take -s).
func plural(n int, noun string) string {
	if n == 1 {
		return "1 " + noun
	}
	return fmt.Sprintf("%d %ss", n, noun)
}

// aeParams counts the parameters (weights and biases) of an autoencoder
// with one hidden layer of h between cols inputs and a code of latent.
func aeParams(cols, h, latent int) int {
	return (cols+1)*h + (h+1)*latent + (latent+1)*h + (h+1)*cols
}
