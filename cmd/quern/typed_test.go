package main

import (
	"encoding/csv"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/stretchr/testify/require"
)

// writePayments writes an invented table of card payments: an
// identifier, an amount (some cells empty), an item count, a yes/no
// column, a channel and a country (some NA), n rows from seed.
func writePayments(t *testing.T, path string, n int, seed uint64) {
	t.Helper()
	r := rand.New(rand.NewPCG(seed, 7))
	var b strings.Builder
	b.WriteString("id,amount,items,card_present,channel,country\n")
	for i := range n {
		ch := []string{"web", "web", "shop", "phone"}[r.IntN(4)]
		amount := fmt.Sprintf("%.2f", 20+10*r.NormFloat64())
		if ch == "shop" {
			amount = fmt.Sprintf("%.2f", 60+15*r.NormFloat64())
		}
		if r.Float64() < 0.05 {
			amount = ""
		}
		country := []string{"FR", "FR", "DE", "ES"}[r.IntN(4)]
		if r.Float64() < 0.05 {
			country = "NA"
		}
		present := "no"
		if ch == "shop" {
			present = "yes"
		}
		fmt.Fprintf(&b, "tx%05d,%s,%d,%s,%s,%s\n", i, amount, 1+r.IntN(4), present, ch, country)
	}
	require.NoError(t, os.WriteFile(path, []byte(b.String()), 0o644))
}

// A table with text categories, a yes/no column and missing cells trains
// at the defaults; it scores by column name in any order, with the
// cells it could not read said in the status column, contributions by
// the file's columns, rows with nothing to score flagged as unscorable;
// inspect lists the fields.
func TestTypedTableThroughTheCommandLine(t *testing.T) {
	dir := t.TempDir()
	writePayments(t, filepath.Join(dir, "pay.csv"), 400, 1)
	r := ok(t, quern(t, dir, nil, "train", "-data", "pay.csv", "-columns", "amount,items,card_present,channel,country", "-out", "m.qm", "-epochs", "3", "-quiet"))
	require.NotContains(t, r.stderr, "error")
	r = ok(t, quern(t, dir, nil, "inspect", "m.qm"))
	require.Contains(t, r.stdout, "fields      amount numeric, ")
	require.Contains(t, r.stdout, "missing filled with")
	require.Contains(t, r.stdout, "card_present boolean (yes/no); channel categorical (3 levels); country categorical (3 levels), ")

	later := "country,extra,channel,card_present,items,amount,id\n" +
		"FR,1,web,no,2,21.5,a1\n" +
		"US,1,fax,maybe,x,25,a2\n" +
		",1,,,,,a3\n" +
		"DE,1,shop,yes,3,,a4\n" +
		"ES,1,shop,no,1,900,a5\n"
	require.NoError(t, os.WriteFile(filepath.Join(dir, "later.csv"), []byte(later), 0o644))
	r = ok(t, quern(t, dir, nil, "score", "-model", "m.qm", "-data", "later.csv", "-keep", "id", "-out", "s.csv", "-quiet"))
	require.Contains(t, r.stderr, "1 unscorable row, flagged (see the status column)")
	require.Contains(t, r.stderr, "1 row with a category level never seen in training, flagged whatever the score")
	require.Contains(t, r.stderr, "2 rows with cells filled in or levels not seen in training")
	f, err := os.Open(filepath.Join(dir, "s.csv"))
	require.NoError(t, err)
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll() // fails on a ragged file
	require.NoError(t, err)
	require.Len(t, recs, 6)
	require.Equal(t, []string{"row", "id", "score", "threshold", "anomaly",
		"feature1", "share1", "expected1", "direction1", "feature2", "share2", "expected2", "direction2",
		"feature3", "share3", "expected3", "direction3", "status"}, recs[0])
	require.Equal(t, "ok", recs[1][17])
	require.Contains(t, recs[2][17], `channel: level "fax" not seen in training`)
	require.Equal(t, "true", recs[2][4], "a level never seen in training: flagged")
	require.Contains(t, recs[2][17], `card_present: "maybe" is neither "yes" nor "no"`)
	require.Equal(t, []string{"3", "a3", "", recs[3][3], "true", "", "", "", "", "", "", "", "", "", "", "", "", "unscorable: no observed cell"}, recs[3])
	require.Contains(t, recs[4][17], "read: amount: missing, filled with")
	require.Equal(t, "true", recs[5][4], "a 900 payment at a shop without the card is flagged")
	for _, rec := range recs[1:] {
		for k := 5; k < 17; k += 4 {
			require.NotContains(t, rec[k], "=", "features are the file's columns, not one-hot parts")
		}
	}
	// the explanations: a number's expected value and direction, a
	// category's expected level
	for k := 5; k < 17; k += 4 {
		switch recs[5][k] {
		case "amount":
			require.Equal(t, "above", recs[5][k+3], "900 is above what the model expects")
			v, err := strconv.ParseFloat(recs[5][k+2], 64)
			require.NoError(t, err)
			require.Less(t, v, 900.0)
		case "card_present":
			// a boolean's expected text, "other" exactly when it is
			// not the row's ("no")
			require.Contains(t, []string{"yes", "no"}, recs[5][k+2])
			require.Equal(t, recs[5][k+2] == "yes", recs[5][k+3] == "other")
		case "channel":
			require.Contains(t, []string{"web", "shop", "phone"}, recs[5][k+2])
			require.Equal(t, recs[5][k+2] != "shop", recs[5][k+3] == "other")
		}
	}

	// a column the model reads is missing: an error naming it
	require.NoError(t, os.WriteFile(filepath.Join(dir, "short.csv"), []byte("amount,items,card_present,channel\n1,2,yes,web\n"), 0o644))
	r = quern(t, dir, nil, "score", "-model", "m.qm", "-data", "short.csv", "-out", "s2.csv")
	require.Equal(t, 1, r.code)
	require.Contains(t, r.stderr, `the model's column "country" is not in the header`)
	// -top 0 keeps the file rectangular
	ok(t, quern(t, dir, nil, "score", "-model", "m.qm", "-data", "later.csv", "-top", "0", "-out", "s3.csv", "-quiet"))
	b, err := os.ReadFile(filepath.Join(dir, "s3.csv"))
	require.NoError(t, err)
	_, err = csv.NewReader(strings.NewReader(string(b))).ReadAll()
	require.NoError(t, err)

	// an identifier column is left out, and said so
	r = ok(t, quern(t, dir, nil, "train", "-data", "pay.csv", "-out", "m4.qm", "-epochs", "1", "-quiet"))
	require.Contains(t, r.stderr, `warning: column "id" left out: each of its 400 cells is different, an identifier rather than a category (quern score -keep id passes it through beside the scores`)
	r = ok(t, quern(t, dir, nil, "inspect", "m4.qm"))
	require.NotContains(t, r.stdout, "id categorical")

	// type overrides and markers reach the model; a bad one is named
	r = ok(t, quern(t, dir, nil, "train", "-data", "pay.csv", "-columns", "amount,items,channel", "-types", "items=categorical", "-missing", "none", "-out", "m2.qm", "-epochs", "1", "-quiet"))
	r = ok(t, quern(t, dir, nil, "inspect", "m2.qm"))
	require.Contains(t, r.stdout, "items categorical (4 levels)")
	r = quern(t, dir, nil, "train", "-data", "pay.csv", "-types", "items=text", "-out", "m3.qm")
	require.Equal(t, 2, r.code)
	require.Contains(t, r.stderr, `-types "items=text": want COLUMN=TYPE`)
}

// Samples of a model of a typed table come as the table's cells: the
// columns by name, categories as levels seen in training, booleans as the
// column's texts, whole numbers whole, numbers within the training range.
func TestTypedSamples(t *testing.T) {
	dir := t.TempDir()
	writePayments(t, filepath.Join(dir, "pay.csv"), 300, 2)
	f, err := os.Open(filepath.Join(dir, "pay.csv"))
	require.NoError(t, err)
	rows, err := csv.NewReader(f).ReadAll()
	f.Close()
	require.NoError(t, err)
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, r := range rows[1:] {
		if v, err := strconv.ParseFloat(r[1], 64); err == nil {
			lo, hi = min(lo, v), max(hi, v)
		}
	}
	for _, kind := range []string{"vae", "gan"} {
		ok(t, quern(t, dir, nil, "train", "-kind", kind, "-data", "pay.csv", "-columns", "amount,items,card_present,channel,country", "-out", kind+".qm", "-epochs", "2", "-quiet"))
		r := ok(t, quern(t, dir, nil, "sample", "-model", kind+".qm", "-n", "50", "-seed", "3"))
		recs, err := csv.NewReader(strings.NewReader(r.stdout)).ReadAll()
		require.NoError(t, err, kind)
		require.Equal(t, []string{"amount", "items", "card_present", "channel", "country"}, recs[0], kind)
		require.Len(t, recs, 51, kind)
		insp := ok(t, quern(t, dir, nil, "inspect", kind+".qm")).stdout
		for _, rec := range recs[1:] {
			if rec[0] != "" {
				v, err := strconv.ParseFloat(rec[0], 64)
				require.NoError(t, err, kind)
				require.GreaterOrEqual(t, v, lo-1e-4, kind)
				require.LessOrEqual(t, v, hi+1e-4, kind)
			}
			if rec[1] != "" {
				_, err := strconv.Atoi(rec[1])
				require.NoError(t, err, "%s: items %q is a whole number", kind, rec[1])
			}
			require.Contains(t, []string{"yes", "no"}, rec[2], kind)
			require.Contains(t, []string{"phone", "shop", "web"}, rec[3], kind)
			require.Contains(t, []string{"DE", "ES", "FR", ""}, rec[4], kind)
		}
		require.Contains(t, insp, "fields", kind)
	}
}

// quern fidelity measures a generative model's samples against held-out
// rows, column by column and for pairs, beside the column-by-column
// baseline, with the copy check; models that do not sample are refused
// by name.
func TestFidelityThroughTheCommandLine(t *testing.T) {
	dir := t.TempDir()
	writePayments(t, filepath.Join(dir, "tr.csv"), 300, 3)
	writePayments(t, filepath.Join(dir, "ho.csv"), 200, 4)
	ok(t, quern(t, dir, nil, "train", "-kind", "vae", "-data", "tr.csv", "-out", "v.qm", "-epochs", "3", "-quiet"))
	r := ok(t, quern(t, dir, nil, "fidelity", "-model", "v.qm", "-train", "tr.csv", "-holdout", "ho.csv", "-quiet"))
	require.Contains(t, r.stdout, "200 samples against 200 held-out rows; baseline: 200 rows drawn column by column from the 300 training rows")
	require.Regexp(t, `(?m)^channel\s+categorical\s+TV\s+\d\.\d{4}\s+\d\.\d{4}$`, r.stdout)
	require.Regexp(t, `(?m)^amount\s+numeric\s+KS\s+`, r.stdout)
	require.Regexp(t, `(?m)^correlations\s+pairs\s+gap\s+`, r.stdout)
	require.Contains(t, r.stdout, "nearest training row: median distance")
	require.Contains(t, r.stdout, "summary: ")
	again := ok(t, quern(t, dir, nil, "fidelity", "-model", "v.qm", "-train", "tr.csv", "-holdout", "ho.csv", "-quiet"))
	require.Equal(t, r.stdout, again.stdout, "same seed, same figures")

	ok(t, quern(t, dir, nil, "train", "-data", "tr.csv", "-out", "a.qm", "-epochs", "1", "-quiet"))
	r = quern(t, dir, nil, "fidelity", "-model", "a.qm", "-train", "tr.csv", "-holdout", "ho.csv")
	require.NotEqual(t, 0, r.code)
	require.Contains(t, r.stderr, "a generative model (a VAE or a GAN)")
	r = quern(t, dir, nil, "fidelity", "-model", "v.qm", "-train", "tr.csv")
	require.Equal(t, 2, r.code)
	require.Contains(t, r.stderr, "-holdout is required")
}

// What scoring could not read is said out loud: a column whose cells are
// mostly not numbers (a decimal comma) gets a warning beside the
// summary, a kept column named like one of the score file's is renamed,
// an empty cell's explanation says missing, and a level that differs from
// a known one only by case says so.
func TestScoreSaysWhatItCouldNotRead(t *testing.T) {
	dir := t.TempDir()
	writePayments(t, filepath.Join(dir, "pay.csv"), 400, 5)
	ok(t, quern(t, dir, nil, "train", "-data", "pay.csv", "-out", "m.qm", "-epochs", "2", "-quiet"))
	later := "id,amount,items,card_present,channel,country,status\n" +
		"q1,\"18,5\",2,no,WEB,FR,a\n" +
		"q2,\"19,5\",1,no,web,FR,b\n" +
		"q3,21.5,,no,web,FR,c\n" +
		"q4,\"30,5\",1,yes,,FR,d\n"
	require.NoError(t, os.WriteFile(filepath.Join(dir, "later.csv"), []byte(later), 0o644))
	r := ok(t, quern(t, dir, nil, "score", "-model", "m.qm", "-data", "later.csv", "-keep", "id,status", "-top", "5", "-out", "s.csv", "-quiet"))
	require.Contains(t, r.stderr, `warning: column "amount": 3 of 4 cells are not numbers (such as "18,5"), read as missing`)
	// an empty channel (a column that had no missing cell in training) is
	// missing, not a level never seen: only WEB counts
	require.Contains(t, r.stderr, "1 row with a category level never seen in training, flagged whatever the score")
	recs := readCSVFile(t, filepath.Join(dir, "s.csv"))
	require.Equal(t, "true", recs[1][5], "the row with a level never seen (WEB, a column without missing cells in training) is flagged in the file too")
	require.Equal(t, []string{"row", "id", "status (kept)", "score"}, recs[0][:4])
	require.Equal(t, "status", recs[0][len(recs[0])-1])
	require.Contains(t, recs[1][len(recs[1])-1], `channel: level "WEB" not seen in training ("web" was: levels are told apart by case)`)
	checked := 0
	for _, row := range recs[1:] {
		for k := 6; k+3 < len(row)-1; k += 4 { // feature1 after row, id, status (kept), score, threshold, anomaly
			if row[k] == "amount" && row[0] != "3" {
				require.Equal(t, "missing", row[k+3], "row %s: an unread amount is missing", row[0])
				checked++
			}
			if (row[k] == "items" && row[0] == "3") || (row[k] == "channel" && row[0] == "4") {
				require.Equal(t, "missing", row[k+3], "row %s: an empty cell is missing", row[0])
				checked++
			}
		}
	}
	require.Equal(t, 5, checked, "every missing cell is among the top 5 columns and was checked")
}

func readCSVFile(t *testing.T, path string) [][]string {
	f, err := os.Open(path)
	require.NoError(t, err)
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	require.NoError(t, err)
	return recs
}
