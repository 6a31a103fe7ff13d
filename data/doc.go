// Package data loads, splits, scales and batches the rows quern trains on.
//
// A Dataset is an in-memory table of float32 rows with optional integer
// labels (Unlabelled marks a row without one, so partly labelled data is
// representable). Loaders read:
//
//   - CSV files, plain or gzip-compressed, with a header or without, column
//     selection and a label column (LoadCSV);
//   - idx files, raw or gzip-compressed, with their label file (LoadIDX);
//     the header's dimensions are checked against the file size before
//     anything is allocated;
//   - folders of PNG images, grey or RGB, one size, optionally one
//     subfolder per class (LoadImages).
//
// Load picks the loader by content (Detect), not by file name. Bad input is
// never a panic: it is a *ParseError naming the file, the line and the
// column (or the image file) and what was wrong.
//
// Split and Batches draw every shuffle from a *rand.Rand the caller seeds,
// so one seed gives the same split and the same batch order every run.
// Scalers (standardisation and min-max) are fitted on the training part and
// marshal as JSON, so a model file carries the exact map its inputs need.
package data
