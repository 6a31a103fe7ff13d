package data

// Fitted is what a model learns of its rows at training time beside its
// weights: the scaler fitted to the training rows, the names of the
// columns, and the shape of image rows. Models embed it, so that a
// trained model can say which rows it reads; it marshals as the
// "scaler", "columns" and "image" sections of a model file.
type Fitted struct {
	// Scaler maps raw rows to the scale the networks work in (nil: none).
	Scaler *Scaler `json:"scaler,omitempty"`
	// Columns names the columns (from the training data).
	Columns []string `json:"columns,omitempty"`
	// Image is the height, width and channels of image rows (nil for
	// tabular data).
	Image []int `json:"image,omitempty"`
	// Encoding, for a table read by type, says how its columns became
	// the inputs (Columns then names the inputs); later files are read by
	// it (CSVConfig.Encoding).
	Encoding *Encoding `json:"encoding,omitempty"`
}

// Explained gives what a score's contributions are reported by: with an
// encoding that groups inputs (a categorical column's levels, a missing
// cell's indicator), each input's column (owner) and the columns' names;
// otherwise a nil owner and the inputs' names.
func (f *Fitted) Explained() (owner []int, names []string) {
	if f.Encoding != nil && !f.Encoding.Plain() {
		return f.Encoding.Owners(), f.Encoding.Names()
	}
	return nil, f.Columns
}

// Schema names the columns and, for images, their shape.
func (f *Fitted) Schema() Schema {
	return Schema{Columns: f.Columns, Image: f.Image, Encoding: f.Encoding}
}
