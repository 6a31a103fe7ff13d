package main

import (
	"bytes"
	"cmp"
	"encoding/csv"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/fleet"
	"github.com/quernlab/quern/internal/kernel/par"
	"github.com/quernlab/quern/internal/stream"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/modelfile"
	"github.com/quernlab/quern/report"
)

// Fleet defaults (common practice, no source: below about a hundred
// rows a group's own scaler, validation split and threshold quantile
// rest on too little; twenty thousand rows make a population model of
// the kind a single model is trained on).
const (
	defaultMinGroupRows = 100
	defaultSharedRows   = 20000
)

// nonSettings are the train flags that do not change a fleet's models:
// where things are written or read from, and what is printed.
var nonSettings = map[string]bool{"out": true, "shard": true, "quiet": true, "report": true, "data": true, "watch": true, "limit": true, "stream": true, "cache": true}

// checkFleet validates the fleet flags before any work and prepares the
// read: the group column kept as text beside each row, not an input.
func (o *trainOpts) checkFleet(set map[string]bool) error {
	for _, f := range []string{"every", "checkpoint", "watch"} {
		if set[f] {
			return usagef("-%s is not for fleets (-group): a fleet's models train side by side and are written once each", f)
		}
	}
	switch {
	case o.minRows < 2:
		return usagef("-min-rows %d: want at least 2", o.minRows)
	case o.shared < 0:
		return usagef("-shared %d: want 0 (no shared model) or a number of rows", o.shared)
	case o.group == o.data.label:
		return usagef("-group %s is also -label: the group column picks a model and cannot be its labels", o.group)
	case slices.Contains(splitList(o.data.columns), o.group):
		return usagef("-group %s is also in -columns: the group column picks a row's model and is not one of its inputs", o.group)
	}
	if o.shard != "" {
		if _, err := fleet.ParseShard(o.shard); err != nil {
			return usagef("-shard %v", err)
		}
	}
	if st, err := os.Stat(o.out); err == nil && !st.IsDir() {
		return usagef("-out %s is a file; with -group it names the fleet's folder", o.out)
	} else if err == nil {
		if err := writable(filepath.Join(o.out, fleet.IndexFile), "-out"); err != nil {
			return err
		}
	} else if err := writable(filepath.Clean(o.out), "-out"); err != nil {
		// made once the data are read and grouped: a run that fails
		// before leaves no empty folder
		return err
	}
	o.data.keep, o.data.exclude = o.group, o.group
	return nil
}

// errText is an error without the path an os error repeats.
func errText(err error) string {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err.Error()
	}
	return err.Error()
}

// fleetJob is one model of a fleet to train.
type fleetJob struct {
	group string // "" for the shared model
	rows  int
	load  func() (*data.Dataset, error) // its rows, read when it trains
	file  string
	res   fleet.Member
	err   error
}

// trainFleet trains one model per value of the -group column (the
// shard's share of them), and the shared model in shard 0, side by side
// on the cores, and writes the fleet's index (or, for a shard, its part).
func trainFleet(e *env, st *status, o *trainOpts, set map[string]bool, full *data.Dataset, format data.Format) error {
	if format != data.FormatCSV {
		return usagef("-group %s: fleets are trained from a CSV file with a group column; %s is %s", o.group, o.data.path, format)
	}
	col := slices.Index(full.KeptColumns, o.group)
	if col < 0 {
		return fmt.Errorf("%s: no column %s to group by", o.data.path, o.group)
	}
	for _, w := range dataWarnings(full) {
		st.warn("%s", w)
	}
	st.begin("group", nil)
	keys := make([]string, full.Rows)
	w := len(full.KeptColumns)
	missing := o.missingMarkers()
	for i := range keys {
		k := strings.TrimSpace(full.Kept[i*w+col])
		if missing[k] {
			k = ""
		}
		keys[i] = k
	}
	fingerprint := full.Fingerprint()
	groups, ungrouped, err := full.GroupBy(keys)
	if err != nil {
		return err
	}
	keys = nil
	fr := fleetRows{rows: full.Rows, ungrouped: ungrouped, fingerprint: fingerprint, counts: make(map[string]int, len(groups))}
	byKey := make(map[string]*data.Dataset, len(groups))
	for _, g := range groups {
		fr.counts[g.Key], byKey[g.Key] = g.Data.Rows, g.Data
	}
	fr.group = func(k string) (*data.Dataset, error) { return byKey[k], nil }
	fr.sample = func(idx []int) (*data.Dataset, error) { return full.Subset(idx), nil }
	return trainFleetFrom(e, st, o, set, fr, format)
}

// missingMarkers are the texts that mark a missing cell (-missing), which
// name no group.
func (o *trainOpts) missingMarkers() map[string]bool {
	missing := map[string]bool{}
	switch strings.TrimSpace(o.data.missing) {
	case "":
		for _, m := range data.DefaultMissing {
			missing[m] = true
		}
	case "none":
	default:
		for _, m := range splitList(o.data.missing) {
			missing[m] = true
		}
	}
	return missing
}

// fleetRows is where a fleet's rows come from: a table in memory,
// grouped in place, or a file regrouped on disk (-stream).
type fleetRows struct {
	rows, ungrouped int
	fingerprint     string
	counts          map[string]int // each group's rows
	// group gives a group's rows, sample the rows at places of the
	// grouped order (the shared model's)
	group  func(key string) (*data.Dataset, error)
	sample func(idx []int) (*data.Dataset, error)
}

// trainFleetFrom trains the fleet of fr's groups: the shard's members,
// and the shared model in shard 0, side by side on the cores.
func trainFleetFrom(e *env, st *status, o *trainOpts, set map[string]bool, fr fleetRows, format data.Format) error {
	sh := fleet.All
	if o.shard != "" {
		sh, _ = fleet.ParseShard(o.shard) // checked in checkFleet
	}
	// the data's file name, not its folder: shards on other machines
	// may see the file elsewhere
	ix := fleet.Index{Format: fleet.FormatName, Version: fleet.Version, GroupColumn: o.group, Kind: o.kind, Seed: o.seed,
		Settings: o.settings, Data: fleet.Data{Path: filepath.Base(o.data.path), Fingerprint: fr.fingerprint, Rows: fr.rows}, MinRows: o.minRows}
	counts, ungrouped := fr.counts, fr.ungrouped
	members, fallback, err := fleet.Plan(counts, o.minRows)
	if err != nil {
		return err
	}
	ix.Fallback, ix.Ungrouped = fallback, ungrouped
	var jobs []*fleetJob
	defer st.end()
	sharedSeed := fleet.SeedFor(o.seed, "")
	if o.shared > 0 && sh.Index == 0 && fr.rows > 0 {
		// a seeded draw from every row, grouped or not, in the grouped
		// order (which does not depend on the file's order of groups)
		n := min(o.shared, fr.rows)
		idx := sampleRows(rand.New(rand.NewPCG(sharedSeed, stream.Split)), fr.rows, n)
		// read now: the members' runs reorder their rows in place
		d, err := fr.sample(idx)
		if err != nil {
			return err
		}
		jobs = append(jobs, &fleetJob{rows: n, load: func() (*data.Dataset, error) { return d, nil }, file: fleet.SharedFile})
	}
	for k, g := range members {
		if sh.Owns(k) {
			jobs = append(jobs, &fleetJob{group: g, rows: counts[g], load: func() (*data.Dataset, error) { return fr.group(g) }, file: fleet.FileName(g)})
		}
	}
	st.end()
	if len(members) == 0 && o.shared == 0 {
		return fmt.Errorf("%s: no group of %s has %d rows or more (-min-rows), and -shared 0 asks for no shared model: nothing to train", o.data.path, o.group, o.minRows)
	}
	if len(fallback) > 0 && len(fallback) >= 4*max(len(members), 1) {
		st.warn("warning: %d of the %d groups of %s have fewer than %d rows (-min-rows) and fall back to the shared model: is %s the column that names the groups?", len(fallback), len(fallback)+len(members), o.group, o.minRows, o.group)
	}
	if o.shared == 0 && (len(fallback) > 0 || ungrouped > 0) {
		st.warn("warning: -shared 0: %s with fewer than %d rows and %s with no %s have no model; quern serve refuses their rows", plural(len(fallback), "group"), o.minRows, plural(ungrouped, "row"), o.group)
	}
	// the models train side by side, one per core: splitting each one's
	// small products over the cores too would only make them wait on
	// each other (the results are the same either way)
	par.Limit(1)
	defer par.Limit(0)
	if err := os.MkdirAll(o.out, 0o755); err != nil {
		return fmt.Errorf("-out %s: cannot make the fleet's folder: %v", o.out, errText(err))
	}
	// the members are written in a folder of their own and take their
	// places only once every one is trained: a run that fails or is
	// stopped leaves the fleet already in -out as it was
	staging := filepath.Join(o.out, fmt.Sprintf(".training-%d-of-%d", sh.Index, sh.Of))
	os.RemoveAll(staging) // an earlier run's, stopped
	if err := os.Mkdir(staging, 0o755); err != nil {
		return fmt.Errorf("-out %s: cannot make a folder for the models being trained: %v", o.out, errText(err))
	}
	defer os.RemoveAll(staging)
	var done atomic.Int64
	st.begin("train fleet", func() string {
		return fmt.Sprintf("%d of %d models trained", done.Load(), len(jobs))
	})
	var failed atomic.Bool
	next := make(chan *fleetJob)
	var wg sync.WaitGroup
	for range max(1, min(runtime.GOMAXPROCS(0), len(jobs))) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for j := range next {
				if failed.Load() {
					continue
				}
				seed := fleet.SeedFor(o.seed, j.group)
				d, err := j.load()
				if err == nil {
					j.res, err = trainMember(e, *o, set, d, format, filepath.Join(staging, j.file), seed)
				}
				j.res.Group, j.err = j.group, err
				if j.err != nil {
					failed.Store(true)
				}
				done.Add(1)
			}
		}()
	}
	for _, j := range jobs {
		next <- j
	}
	close(next)
	wg.Wait()
	st.end()
	if !failed.Load() {
		// the members on disk, then in their places, before the index
		// that names them
		st.begin("sync", nil)
		paths := make([]string, len(jobs))
		for i, j := range jobs {
			paths[i] = filepath.Join(staging, j.file)
		}
		if err := modelfile.Sync(paths...); err != nil {
			return err
		}
		for i, j := range jobs {
			paths[i] = filepath.Join(o.out, j.file)
			if err := os.Rename(filepath.Join(staging, j.file), paths[i]); err != nil {
				return fmt.Errorf("-out %s: %v", o.out, errText(err))
			}
		}
		if err := modelfile.Sync(paths...); err != nil {
			return err
		}
		st.end()
	}
	part := fleet.Part{Shard: sh, Groups: len(members), Index: ix}
	part.Index.Members = []fleet.Member{}
	for _, j := range jobs {
		if j.err != nil {
			what := "the shared model"
			if j.group != "" {
				what = fmt.Sprintf("%s %s", o.group, j.group)
			}
			return fmt.Errorf("%s (%s): %w", what, plural(j.rows, "row"), j.err)
		}
		if j.file == fleet.SharedFile {
			m := j.res
			m.Group = ""
			part.Index.Shared = &m
		} else {
			part.Index.Members = append(part.Index.Members, j.res)
		}
	}
	if sh.Of == 1 {
		merged, err := fleet.Merge([]fleet.Part{part})
		if err != nil {
			return err
		}
		st.begin("write", nil)
		if err := fleet.WriteIndex(o.out, merged); err != nil {
			return err
		}
		// an earlier fleet's members the new one has not
		gone, err := fleet.RemoveOthers(o.out, merged)
		if err != nil {
			return err
		}
		st.end()
		if gone > 0 {
			st.warn("removed %s an earlier fleet left in %s", plural(gone, "model file"), o.out)
		}
		ix = *merged
	} else {
		st.begin("write", nil)
		if err := fleet.WritePart(o.out, &part); err != nil {
			return err
		}
		st.end()
		ix = part.Index
	}
	if o.report != "" {
		st.begin("report", nil)
		if err := writeFleetReport(o.report, &ix, sh); err != nil {
			return err
		}
		st.end()
	}
	for _, line := range fleetSummary(&ix, sh, o, len(members)) {
		st.result("%s", line)
	}
	if o.report != "" {
		st.say("report: %s", filepath.Join(o.report, "index.html"))
	}
	st.done()
	return nil
}

// trainMember trains one model of a fleet with the run's flags and its
// own seed, quietly: what training would print is kept as the member's
// warnings.
func trainMember(e *env, o trainOpts, set map[string]bool, d *data.Dataset, format data.Format, path string, seed uint64) (fleet.Member, error) {
	var buf bytes.Buffer
	st := newStatus(&buf, true)
	o.seed, o.member = seed, true
	// what the member's file records of its data: the file's name (as
	// the index), no limits (they change no model), so that every shard
	// writes the same file wherever the data lie
	o.data.path, o.data.limits = filepath.Base(o.data.path), limitFlag{}
	res, err := trainLoaded(e, st, &o, set, d, format, path, "", "", "")
	st.end()
	if err != nil {
		return fleet.Member{}, err
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return fleet.Member{}, err
	}
	m := fleet.Member{File: filepath.Base(path), SHA256: fleet.Hash(b), Rows: d.Rows, Epochs: len(res.h.Epochs)}
	if res.val && len(res.h.Epochs) > 0 {
		_, vl := res.h.Loss(len(res.h.Epochs))
		m.ValidationLoss = &vl
	}
	if res.th != nil {
		v := res.th.Value
		m.Threshold = &v
	}
	for _, line := range strings.Split(buf.String(), "\n") {
		if w, ok := strings.CutPrefix(line, "warning: "); ok {
			m.Warnings = append(m.Warnings, w)
		} else if strings.HasPrefix(line, "no threshold") {
			m.Warnings = append(m.Warnings, line)
		}
	}
	return m, nil
}

// spread is the lowest, median and highest of a member figure, with the
// groups of the extremes.
type spread struct {
	n                int
	lo, mid, hi      float64
	loGroup, hiGroup string
}

func spreadOf(ms []fleet.Member, get func(fleet.Member) *float64) spread {
	type gv struct {
		g string
		v float64
	}
	var vs []gv
	for _, m := range ms {
		if p := get(m); p != nil {
			vs = append(vs, gv{m.Group, *p})
		}
	}
	if len(vs) == 0 {
		return spread{}
	}
	slices.SortStableFunc(vs, func(a, b gv) int { return cmp.Compare(a.v, b.v) })
	mid := vs[len(vs)/2].v
	if len(vs)%2 == 0 {
		mid = (vs[len(vs)/2-1].v + mid) / 2
	}
	return spread{len(vs), vs[0].v, mid, vs[len(vs)-1].v, vs[0].g, vs[len(vs)-1].g}
}

// in says the spread with the extremes' groups named by column.
func (s spread) in(column string) string {
	return fmt.Sprintf("lowest %.4g (%s %s), median %.4g, highest %.4g (%s %s)", s.lo, column, s.loGroup, s.mid, s.hi, column, s.hiGroup)
}

func valLoss(m fleet.Member) *float64   { return m.ValidationLoss }
func threshold(m fleet.Member) *float64 { return m.Threshold }
func rowsOf(m fleet.Member) *float64    { v := float64(m.Rows); return &v }

// fleetSummary is the closing lines of a fleet's (or a shard's) run.
func fleetSummary(ix *fleet.Index, sh fleet.Shard, o *trainOpts, planned int) []string {
	var out []string
	shared := ""
	if ix.Shared != nil {
		shared = fmt.Sprintf(", and a shared model on %s drawn from all groups", plural(ix.Shared.Rows, "row"))
	}
	if sh.Of == 1 {
		out = append(out, fmt.Sprintf("wrote the fleet %s: %d models, one per %s, each %s%s", filepath.Join(o.out, fleet.IndexFile), len(ix.Members), ix.GroupColumn, kindPhrase(ix.Kind), shared))
	} else {
		out = append(out, fmt.Sprintf("wrote shard %s of the fleet into %s: %d of its %d models, each %s%s (%s); when every shard has run: quern merge -out FLEET FOLDER...", sh, o.out, len(ix.Members), planned, kindPhrase(ix.Kind), shared, sh.PartFile()))
	}
	if len(ix.Members) > 0 {
		out = append(out, "rows per model: "+spreadOf(ix.Members, rowsOf).in(ix.GroupColumn))
	}
	if s := spreadOf(ix.Members, valLoss); s.n > 0 {
		out = append(out, "validation loss per model: "+s.in(ix.GroupColumn))
	}
	if s := spreadOf(ix.Members, threshold); s.n > 0 {
		out = append(out, "threshold per model: "+s.in(ix.GroupColumn))
	}
	if n := len(ix.Fallback); n > 0 {
		names := make([]string, 0, 5)
		for _, f := range ix.Fallback[:min(n, 5)] {
			names = append(names, fmt.Sprintf("%s (%d)", f.Group, f.Rows))
		}
		if n > 5 {
			names = append(names, "...")
		}
		to := "scored by the shared model"
		if ix.Shared == nil && sh.Index == 0 {
			to = "with no model (-shared 0)"
		} else if ix.Shared == nil {
			to = "scored by the shared model of shard 0"
		}
		out = append(out, fmt.Sprintf("%s with fewer than %d rows (-min-rows), %s: %s", plural(n, "group"), ix.MinRows, to, strings.Join(names, ", ")))
	}
	if ix.Ungrouped > 0 {
		where := "only in the shared model's draw"
		if ix.Shared == nil && sh.Index == 0 {
			where = "and no shared model (-shared 0): their rows are refused"
		}
		out = append(out, fmt.Sprintf("%s with an empty %s: in no group's model (%s)", plural(ix.Ungrouped, "row"), ix.GroupColumn, where))
	}
	warned := 0
	var first []string
	all := ix.Members
	if ix.Shared != nil {
		all = append([]fleet.Member{*ix.Shared}, all...)
	}
	for _, m := range all {
		if len(m.Warnings) > 0 {
			warned++
			if len(first) < 3 {
				name := m.Group
				if m.File == fleet.SharedFile {
					name = "the shared model"
				}
				first = append(first, fmt.Sprintf("%s: %s", name, m.Warnings[0]))
			}
		}
	}
	if warned > 0 {
		out = append(out, fmt.Sprintf("warnings for %s (all in %s): %s", plural(warned, "model"), map[bool]string{true: fleet.IndexFile, false: sh.PartFile()}[sh.Of == 1], strings.Join(first, "; ")))
	}
	if ix.Kind != "gan" {
		out = append(out, anomaly.Caution)
	}
	return out
}

// writeFleetReport writes a fleet's page and members.csv into dir.
func writeFleetReport(dir string, ix *fleet.Index, sh fleet.Shard) error {
	rows := [][]string{{"group", "model", "file", "rows", "epochs", "validation_loss", "threshold", "warnings"}}
	num := func(p *float64) string {
		if p == nil {
			return ""
		}
		return strconv.FormatFloat(*p, 'g', 6, 64)
	}
	all := ix.Members
	if ix.Shared != nil {
		all = append([]fleet.Member{*ix.Shared}, all...)
	}
	for _, m := range all {
		kind := "own"
		if m.File == fleet.SharedFile {
			kind = "shared"
		}
		rows = append(rows, []string{m.Group, kind, m.File, strconv.Itoa(m.Rows), strconv.Itoa(m.Epochs), num(m.ValidationLoss), num(m.Threshold), strings.Join(m.Warnings, "; ")})
	}
	var b bytes.Buffer
	cw := csv.NewWriter(&b)
	cw.WriteAll(rows)
	if err := os.WriteFile(filepath.Join(dir, "members.csv"), b.Bytes(), 0o644); err != nil {
		return fmt.Errorf("-report: %v", err)
	}
	// the page lists the members worst first: highest validation loss
	table := slices.Clone(rows[1:])
	caption := "Members, highest validation loss first (all of them in members.csv)"
	if spreadOf(all, valLoss).n == 0 {
		caption = "Members (all of them in members.csv; no validation losses: the models were cross-fitted, -folds, or trained without -val rows)"
	}
	slices.SortStableFunc(table, func(a, b []string) int {
		va, ea := strconv.ParseFloat(a[5], 64)
		vb, eb := strconv.ParseFloat(b[5], 64)
		switch {
		case ea != nil && eb != nil:
			return 0
		case ea != nil:
			return 1
		case eb != nil:
			return -1
		}
		return cmp.Compare(vb, va)
	})
	title := fmt.Sprintf("A fleet of %d models by %s", len(ix.Members), ix.GroupColumn)
	if sh.Of > 1 {
		title = fmt.Sprintf("Shard %s of a fleet by %s: %d models", sh, ix.GroupColumn, len(ix.Members))
	}
	var paras []string
	for _, p := range fleetSummary(ix, sh, &trainOpts{out: "."}, len(ix.Members))[1:] {
		if p != anomaly.Caution { // the page says it once, on its own
			paras = append(paras, p)
		}
	}
	pg := report.Page{Title: title, Caution: anomaly.Caution, Generated: time.Now().UTC().Format("2006-01-02 15:04 UTC"), Version: version(),
		Paragraphs: paras,
		Summary: []report.Setting{{Name: "kind", Value: ix.Kind}, {Name: "group column", Value: ix.GroupColumn}, {Name: "models", Value: strconv.Itoa(len(ix.Members))},
			{Name: "rows read", Value: strconv.Itoa(ix.Data.Rows)}, {Name: "seed", Value: strconv.FormatUint(ix.Seed, 10)}},
		Tables:   []report.Table{{Caption: caption, Header: rows[0], Rows: table}},
		Settings: []report.Setting{{Name: "training flags", Value: strings.Join(ix.Settings, " ")}, {Name: "data", Value: ix.Data.Path}, {Name: "min rows", Value: strconv.Itoa(ix.MinRows)}},
	}
	return pg.Write(dir)
}

func cmdMerge(e *env, args []string) error {
	fs := newFlags(e, "merge", "-out FLEET SHARD_FOLDER...")
	out := fs.String("out", "", "the fleet's folder to write (required; may be one of the shards' folders)")
	dirs, err := parse(e, fs, args, 1<<20)
	if err != nil {
		return err
	}
	if *out == "" {
		return usagef("-out is required")
	}
	if len(dirs) == 0 {
		return usagef("name the shards' folders (each holds a part-I-of-N.json beside its model files)")
	}
	parts, from, err := fleet.ReadParts(dirs...)
	if err != nil {
		return err
	}
	ix, err := fleet.Merge(parts)
	if err != nil {
		return err
	}
	// every model file comes from the folder of the part that names it,
	// checked against its hash before anything is written, and is copied
	// when that is not -out
	where := map[string]string{}
	for i, p := range parts {
		for _, m := range p.Index.Members {
			where[m.File] = from[i]
		}
		if p.Index.Shared != nil {
			where[p.Index.Shared.File] = from[i]
		}
	}
	all := ix.Members
	if ix.Shared != nil {
		all = append([]fleet.Member{*ix.Shared}, all...)
	}
	check := func(m fleet.Member) ([]byte, error) {
		src := filepath.Join(where[m.File], m.File)
		b, err := os.ReadFile(src)
		if err != nil {
			return nil, fmt.Errorf("%s: %v (its shard's part names it)", src, errText(err))
		}
		if h := fleet.Hash(b); h != m.SHA256 {
			return nil, fmt.Errorf("%s: its SHA-256 is %.12s..., its shard's part says %.12s... (changed since the shard ran; run the shard again)", src, h, m.SHA256)
		}
		return b, nil
	}
	for _, m := range all {
		if _, err := check(m); err != nil {
			return err
		}
	}
	if st, err := os.Stat(*out); err == nil && !st.IsDir() {
		return usagef("-out %s is a file, not a folder", *out)
	}
	if err := os.MkdirAll(*out, 0o755); err != nil {
		return fmt.Errorf("-out %s: %v", *out, errText(err))
	}
	copied := 0
	for _, m := range all {
		if sameFile(where[m.File], *out) {
			continue
		}
		b, err := check(m) // again: the copy is of the bytes checked
		if err != nil {
			return err
		}
		if err := fleet.WriteFile(filepath.Join(*out, m.File), b); err != nil {
			return err
		}
		copied++
	}
	if err := fleet.WriteIndex(*out, ix); err != nil {
		return err
	}
	gone, err := fleet.RemoveOthers(*out, ix)
	if err != nil {
		return err
	}
	line := fmt.Sprintf("wrote the fleet %s: %d models by %s from %s (%s copied", filepath.Join(*out, fleet.IndexFile), len(ix.Members), ix.GroupColumn, plural(parts[0].Shard.Of, "shard"), plural(copied, "model file"))
	if gone > 0 {
		line += fmt.Sprintf("; %s an earlier fleet left there removed", plural(gone, "model file"))
	}
	fmt.Fprintln(e.stderr, line+")")
	return nil
}

// scoringFleet scores rows each with its group's model: quern score
// -fleet. Its counts are what the closing line says.
type scoringFleet struct {
	f   *fleet.Fleet[model.Model]
	col string
	// own, shared and none count the rows by where they went
	own, shared, none int
}

// fleetScores are a run of rows' scores and, for a fleet, where each
// row went ("own", "shared", or "none").
type fleetScores struct {
	scores []anomaly.Score
	routes []string
}

// openFleetForScoring opens a fleet for quern score: its models must
// score anomalies; the group column is read beside the rows (first of
// the kept columns), and the rows are read by a member's schema (every
// member reads the same columns).
func openFleetForScoring(dir string, d *dataFlags, out string) (*loaded, *scoringFleet, error) {
	if err := distinctPaths(map[string]string{"-data": d.path, "-out": out, "-fleet": filepath.Join(dir, fleet.IndexFile)}); err != nil {
		return nil, nil, err
	}
	if out != "" && out != "-" {
		if err := writable(out, "-out"); err != nil {
			return nil, nil, err
		}
	}
	f, err := fleet.Open(dir)
	if err != nil {
		return nil, nil, err
	}
	any := f.Any()
	if any == nil {
		return nil, nil, fmt.Errorf("the fleet %s has no models", dir)
	}
	path := filepath.Join(dir, any.Member.File)
	file, err := modelfile.Read(path, 0)
	if err != nil {
		return nil, nil, err
	}
	l := &loaded{path: path, file: file, model: any.Value}
	if _, ok := any.Value.(model.Scorer); !ok {
		return nil, nil, fmt.Errorf("score -fleet needs models with anomaly scores; the fleet %s holds models of kind %q", dir, any.Value.Kind())
	}
	if fm, err := data.Detect(d.path); err == nil && fm == data.FormatParquet {
		return nil, nil, usagef("score -fleet reads CSV files: the group column is read as text beside the rows, and %s is a Parquet file", d.path)
	}
	col := f.Index().GroupColumn
	keep := splitList(d.keep)
	if slices.Contains(keep, col) {
		return nil, nil, usagef("-keep %s: the fleet's group column is kept beside the scores already", col)
	}
	d.keep = strings.Join(append([]string{col}, keep...), ",")
	return l, &scoringFleet{f: f, col: col}, nil
}

// score scores n rows x, each with the model of its group (the first of
// its nk kept texts); a row whose group has no model and the fleet no
// shared model is flagged unscorable, never scored by another group's.
func (sf *scoringFleet) score(x []float32, n, top int, kept []string, nk int) (fleetScores, error) {
	cols := len(x) / max(n, 1)
	out := fleetScores{scores: make([]anomaly.Score, n), routes: make([]string, n)}
	keys := func(i int) string { return strings.TrimSpace(kept[i*nk]) }
	order, none := sf.f.Deal(n, keys)
	for _, i := range none {
		out.routes[i] = "none"
		out.scores[i] = anomaly.Score{Value: math.NaN(), Threshold: math.NaN(), Anomaly: true,
			Unscorable: fmt.Sprintf("no model for %s %q, and the fleet has no shared model", sf.col, keys(i))}
	}
	var buf []float32
	for _, b := range order {
		buf = buf[:0]
		for _, i := range b.Rows {
			buf = append(buf, x[i*cols:(i+1)*cols]...)
		}
		sc := b.Entry.Value.(model.Scorer)
		route := "own"
		if b.Shared {
			route = "shared"
		}
		if sc.Calibrated() == nil {
			for _, i := range b.Rows {
				out.routes[i] = route
				out.scores[i] = anomaly.Score{Value: math.NaN(), Threshold: math.NaN(), Anomaly: true, Unscorable: fmt.Sprintf("the model of %s %q has no threshold", sf.col, b.Entry.Group)}
			}
			continue
		}
		res, err := sc.Score(buf, len(b.Rows), top)
		if err != nil {
			return out, fmt.Errorf("%s %q: %w", sf.col, b.Entry.Group, err)
		}
		for k, i := range b.Rows {
			out.scores[i], out.routes[i] = res[k], route
		}
	}
	return out, nil
}

// count adds a run's routes to the fleet's counts (nil: one model).
func (sf *scoringFleet) count(r fleetScores) {
	if sf == nil {
		return
	}
	for _, to := range r.routes {
		switch to {
		case "own":
			sf.own++
		case "shared":
			sf.shared++
		default:
			sf.none++
		}
	}
}

// sampleRows draws n distinct places of N (n <= N), sorted, by Floyd's
// algorithm (Bentley and Floyd, "Programming pearls: a sample of
// brilliance", Communications of the ACM 30(9), 1987): memory for the n
// places only, whatever N.
func sampleRows(rng *rand.Rand, N, n int) []int {
	chosen := make(map[int]bool, n)
	out := make([]int, 0, n)
	for j := N - n; j < N; j++ {
		t := rng.IntN(j + 1)
		if chosen[t] {
			t = j
		}
		chosen[t] = true
		out = append(out, t)
	}
	slices.Sort(out)
	return out
}
