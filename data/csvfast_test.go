package data

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strconv"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// The batched reader gives what the record-at-a-time reader gave (rows,
// labels, columns) or the same error (kind, line and column), on files
// of random shape with quotes, blank lines, CRLF, multi-line quoted
// fields, bad cells, ragged rows and a byte-order mark, at batch sizes
// that cut records anywhere. The reference is the reader it replaced.
func TestBatchedCSVMatchesReference(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	cells := []string{"1", "-2.5", " 3e2 ", "0.001", "7", `"4"`, `"5,0"`, "x", "", "NaN", "1e40", `"multi` + "\n" + `line"`, `"a""b"`}
	for trial := 0; trial < 3000; trial++ {
		width := 1 + rng.IntN(4)
		rows := rng.IntN(12)
		var b strings.Builder
		if rng.IntN(8) == 0 {
			b.WriteString("\ufeff")
		}
		for j := 0; j < width; j++ {
			if j > 0 {
				b.WriteByte(',')
			}
			fmt.Fprintf(&b, "h%d", j)
		}
		nl := "\n"
		if rng.IntN(4) == 0 {
			nl = "\r\n"
		}
		b.WriteString(nl)
		for r := 0; r < rows; r++ {
			if rng.IntN(10) == 0 {
				b.WriteString(nl) // blank line
			}
			w := width
			if rng.IntN(30) == 0 {
				w = width + 1 - 2*rng.IntN(2) // ragged
			}
			for j := 0; j < w; j++ {
				if j > 0 {
					b.WriteByte(',')
				}
				c := "1"
				if rng.IntN(6) == 0 {
					c = cells[rng.IntN(len(cells))]
				} else {
					c = fmt.Sprint(rng.IntN(100))
				}
				b.WriteString(c)
			}
			if r < rows-1 || rng.IntN(2) == 0 {
				b.WriteString(nl)
			}
		}
		cfg := CSVConfig{NoHeader: rng.IntN(5) == 0, SkipLines: rng.IntN(2) * rng.IntN(2)}
		if width > 1 && rng.IntN(3) == 0 {
			cfg.Label = "h0"
			if cfg.NoHeader {
				cfg.Label = "c0"
			}
		}
		text := b.String()
		want, werr := readCSVReference(strings.NewReader(text), "f.csv", cfg)
		got, gerr := ReadCSV(strings.NewReader(text), "f.csv", cfg)
		if werr != nil || gerr != nil {
			require.Error(t, gerr, "trial %d: %q: the reference failed with %v", trial, text, werr)
			require.Error(t, werr, "trial %d: %q: the batched reader failed with %v", trial, text, gerr)
			var wp, gp *ParseError
			// header errors: the reference named the line after the
			// skipped ones even when blank lines came between; the
			// batched reader names the header's own line
			header := strings.HasPrefix(werr.Error(), "data: f.csv:") && (strings.Contains(werr.Error(), ": no ") || strings.Contains(werr.Error(), "duplicate"))
			// a quoted field that runs on is named at the line it opens
			// on, where the reference named the line it failed on
			header = header || strings.Contains(gerr.Error(), "runs to line")
			if errors.As(werr, &wp) && errors.As(gerr, &gp) && !header {
				require.Equal(t, wp.Line, gp.Line, "trial %d: %q\nreference: %v\nbatched:   %v", trial, text, werr, gerr)
				if wp.Column > 0 && !strings.Contains(wp.Msg, "quote") {
					require.Equal(t, wp.Column, gp.Column, "trial %d: %q\nreference: %v\nbatched:   %v", trial, text, werr, gerr)
				}
			}
			continue
		}
		require.Equal(t, want.Rows, got.Rows, "trial %d: %q", trial, text)
		require.Equal(t, want.X, got.X, "trial %d: %q", trial, text)
		require.Equal(t, want.Labels, got.Labels, "trial %d: %q", trial, text)
		require.Equal(t, want.Columns, got.Columns, "trial %d: %q", trial, text)
	}
}

// Files of many batches: the same rows as the reference, and a bad cell
// far in is reported at its own line.
func TestBatchedCSVLongFiles(t *testing.T) {
	var b strings.Builder
	b.WriteString("a,b\n")
	n := 3*batchRecords + 5
	for i := 0; i < n; i++ {
		fmt.Fprintf(&b, "%d,%d.25\n", i, i%9)
	}
	text := b.String()
	want, err := readCSVReference(strings.NewReader(text), "f.csv", CSVConfig{})
	require.NoError(t, err)
	got, err := ReadCSV(strings.NewReader(text), "f.csv", CSVConfig{})
	require.NoError(t, err)
	require.Equal(t, want.X, got.X)
	bad := strings.Replace(text, "\n40000,", "\n4x0000,", 1)
	_, err = ReadCSV(strings.NewReader(bad), "f.csv", CSVConfig{})
	require.EqualError(t, err, `data: f.csv:40002: column 1 (a): "4x0000" is not a finite number`)
	_, err = ReadCSV(strings.NewReader(text), "f.csv", CSVConfig{Limits: Limits{Rows: 40000}})
	var le *LimitError
	require.ErrorAs(t, err, &le)
	require.Equal(t, 40002, le.Line, "the first row past the limit")
}

// BenchmarkReadCSV reads 100,000 rows of 32 columns of four-decimal
// numbers from memory (about 23 MB of text).
func BenchmarkReadCSV(b *testing.B) {
	var sb strings.Builder
	for j := 0; j < 32; j++ {
		if j > 0 {
			sb.WriteByte(',')
		}
		fmt.Fprintf(&sb, "s%d", j)
	}
	sb.WriteByte('\n')
	rng := rand.New(rand.NewPCG(1, 1))
	for i := 0; i < 100000; i++ {
		for j := 0; j < 32; j++ {
			if j > 0 {
				sb.WriteByte(',')
			}
			fmt.Fprintf(&sb, "%.4f", 10*rng.NormFloat64())
		}
		sb.WriteByte('\n')
	}
	text := sb.String()
	b.SetBytes(int64(len(text)))
	b.ResetTimer()
	for b.Loop() {
		if _, err := ReadCSV(strings.NewReader(text), "b.csv", CSVConfig{}); err != nil {
			b.Fatal(err)
		}
	}
}

// parseFloat32 gives strconv.ParseFloat(s, 32)'s bits, on random plain
// decimals of every length around the fast path's bounds and on forms it
// leaves to strconv. strconv is the reference.
func TestParseFloat32MatchesStrconv(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 3))
	forms := []string{"0", "-0", "+1", ".5", "5.", "-.25", "16777215", "16777216", "16777217", "1.6777217", "0.0000000001", "0.00000000001", "1e3", "1E-3", "inf", "0x10", "1_000", "--1", "1..2", ".", "-", "", "3.4028235e38", "123456789", "12345.6789"}
	for i := 0; i < 200000; i++ {
		var b strings.Builder
		if rng.IntN(2) == 0 {
			b.WriteByte('-')
		}
		n := 1 + rng.IntN(11)
		dot := rng.IntN(n + 1)
		for k := 0; k < n; k++ {
			if k == dot && rng.IntN(3) > 0 {
				b.WriteByte('.')
			}
			b.WriteByte(byte('0' + rng.IntN(10)))
		}
		forms = append(forms, b.String())
	}
	for _, s := range forms {
		want, werr := strconv.ParseFloat(s, 32)
		got, gerr := parseFloat32(s)
		require.Equal(t, werr == nil, gerr == nil, "%q", s)
		if werr == nil {
			require.Equal(t, math.Float32bits(float32(want)), math.Float32bits(float32(got)), "%q: strconv %v, ours %v", s, want, got)
		}
	}
}
