package modelio

import (
	"math"
	"strconv"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
)

// Explain fills the Expected and Direction of each score's top features
// from the raw rows x and the model's raw reconstruction of them (rows
// of cols values), by the model's encoding when it has one: a feature is
// then a table column (a category's levels, a missing-cell indicator
// belong to it), else an input. A number's expected value is kept within
// the range the column had in training: far outside it a network's
// reconstruction extrapolates, and says little of what a normal row
// holds.
func Explain(f *data.Fitted, scores []anomaly.Score, x, recon []float32, cols int) {
	enc := f.Encoding
	var ranges []data.Field // a plain encoding's fields, for their ranges
	if enc != nil && enc.Plain() {
		ranges, enc = enc.Fields, nil
	}
	var at []int // each field's first input
	if enc != nil {
		n := 0
		for i := range enc.Fields {
			at = append(at, n)
			n += enc.Fields[i].Width()
		}
	}
	for r := range scores {
		row, rec := x[r*cols:(r+1)*cols], recon[r*cols:(r+1)*cols]
		for k := range scores[r].Top {
			ft := &scores[r].Top[k]
			if enc == nil {
				if j := ft.Column; j < cols {
					e, integer := rec[j], false
					if j < len(ranges) {
						e, integer = within(e, &ranges[j]), ranges[j].Type == data.Integer
					}
					ft.Expected, ft.Direction = number(e, integer), direction(row[j], e)
				}
				continue
			}
			if ft.Column >= len(enc.Fields) {
				continue
			}
			fl := &enc.Fields[ft.Column]
			j := at[ft.Column]
			missing := fl.Indicator && row[j+fl.Width()-1] == 1
			switch fl.Type {
			case data.Numeric, data.Integer:
				e := within(rec[j], fl)
				ft.Expected, ft.Direction = number(e, fl.Type == data.Integer), direction(row[j], e)
			case data.Boolean:
				ft.Expected = fl.False
				if rec[j] >= 0.5 {
					ft.Expected = fl.True
				}
				if (row[j] >= 0.5) != (rec[j] >= 0.5) {
					ft.Direction = "other"
				}
			case data.Categorical:
				best, seen := 0, -1
				for l := range fl.Levels {
					if rec[j+l] > rec[j+best] {
						best = l
					}
					if row[j+l] == 1 {
						seen = l
					}
				}
				ft.Expected = fl.Levels[best]
				if seen != best {
					ft.Direction = "other"
				}
			}
			if missing {
				ft.Direction = "missing"
			}
		}
	}
}

// number writes a reconstruction: four significant digits, or a whole
// number for an integer column.
func number(v float32, integer bool) string {
	if integer {
		return strconv.FormatFloat(math.Round(float64(v)), 'f', 0, 64)
	}
	return strconv.FormatFloat(float64(v), 'g', 4, 32)
}

// direction says whether the value is above or below its reconstruction.
func direction(v, rec float32) string {
	switch {
	case v > rec:
		return "above"
	case v < rec:
		return "below"
	}
	return ""
}

// within clamps a reconstruction to the field's training range (when it
// has one).
func within(v float32, f *data.Field) float32 {
	if f.Max > f.Min {
		return float32(min(max(float64(v), f.Min), f.Max))
	}
	return v
}

// MarkMissing sets the direction of each of a score's top features that
// the row's read note (data.NoteColumns) says was read as missing to
// "missing": a column without a missing-cell indicator is filled in
// unseen by the model, and its explanation would otherwise compare the
// fill with the expectation.
func MarkMissing(s *anomaly.Score, note string) {
	missing, _, _ := data.NoteColumns(note)
	for _, name := range missing {
		for k := range s.Top {
			if s.Top[k].Name == name {
				s.Top[k].Direction = "missing"
			}
		}
	}
}

// FlagUnseen flags each scored row (raw rows x of cols inputs) that holds
// a category level never seen in training (data.Encoding.Unseen): such a
// row is as surprising as a category can be, whatever its score.
func FlagUnseen(f *data.Fitted, scores []anomaly.Score, x []float32, cols int) {
	enc := f.Encoding
	if enc == nil || enc.Plain() || enc.Width() != cols {
		return
	}
	for r := range scores {
		if name := enc.Unseen(x[r*cols : (r+1)*cols]); name != "" {
			scores[r].Unseen, scores[r].Anomaly = name, true
		}
	}
}
