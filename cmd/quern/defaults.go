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
// cross-fitting).
func (o *trainOpts) chooseDefaults(d *data.Dataset, rows int, set map[string]bool) ([]string, error) {
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
		k := 1 // a single row has no spectrum (and is warned about)
		if d.Rows >= 2 {
			ev, err := data.Spectrum(d, kind)
			if err != nil {
				return nil, fmt.Errorf("choosing the code width (give -latent): %w", err)
			}
			k = data.ComponentsFor(ev, codeVariance)
		}
		capAt := min(max(d.Cols-1, 1), maxDefaultCode)
		o.latent = min(max(k, 1), capAt)
		reason := fmt.Sprintf("%d principal components explain %.0f%% of the variance of the rows (%s scaling)", k, 100*codeVariance, kind)
		if k > capAt {
			reason += fmt.Sprintf(", capped at %d", capAt)
		}
		why = append(why, fmt.Sprintf("code width %d: %s (-latent sets it)", o.latent, reason))
	}
	if coded && !set["hidden"] {
		h := min(max(hiddenPerInput*d.Cols, minDefaultHidden, 2*o.latent), maxDefaultHidden)
		h = (h + 7) / 8 * 8
		line := fmt.Sprintf("%d per input column, between %d and %d", hiddenPerInput, minDefaultHidden, maxDefaultHidden)
		if fit := rows * weightsPerRow / (2 * (d.Cols + o.latent)); fit < h {
			h = max(fit, o.latent, 1)
			line = fmt.Sprintf("at most about %d weights per training row (%d rows)", weightsPerRow, rows)
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
		default:
			o.epochs = defaultGANEpochs
		}
	}
	return why, nil
}
