package fleet

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"hash/fnv"
	"io"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"

	"github.com/quernlab/quern/internal/stream"
)

// File names in a fleet's folder.
const (
	// IndexFile is the fleet's index.
	IndexFile = "fleet.json"
	// SharedFile is the shared model's file.
	SharedFile = "shared.qm"
	// FormatName is the index's format field.
	FormatName = "quern-fleet"
	// Version is the index's format version this package writes and reads.
	Version = 1
)

// ErrFleet is wrapped by every error about a fleet's files: an index that
// does not parse, a member file missing or changed, parts that do not
// belong together.
var ErrFleet = errors.New("fleet")

// Error is a problem with one file of a fleet.
type Error struct {
	Path string // the file
	Msg  string
}

func (e *Error) Error() string { return "fleet: " + e.Path + ": " + e.Msg }

// Unwrap makes every Error an ErrFleet.
func (e *Error) Unwrap() error { return ErrFleet }

// Index is a fleet's fleet.json. It holds no time, host name or shard, so
// that a fleet trained in one process and one merged from shards have the
// same index, byte for byte.
type Index struct {
	Format  string `json:"format"`
	Version int    `json:"version"`
	// GroupColumn names the column whose value picks a row's model.
	GroupColumn string `json:"group_column"`
	// Kind is the members' model kind (ae, vae or gan).
	Kind string `json:"kind"`
	// Seed is the run's seed; member g's is SeedFor(Seed, g).
	Seed uint64 `json:"seed"`
	// Settings are the training settings every member was trained with,
	// as the command line wrote them (shards must agree on them).
	Settings []string `json:"settings"`
	// Data describes the file the fleet was trained on.
	Data Data `json:"data"`
	// MinRows is the fewest rows a group needs for a model of its own.
	MinRows int `json:"min_rows"`
	// Members are the groups with a model of their own, sorted by group.
	Members []Member `json:"members"`
	// Shared is the model of the groups with too few rows and of groups
	// not seen in training (nil: none; such rows are refused).
	Shared *Member `json:"shared,omitempty"`
	// Fallback lists the groups with fewer than MinRows rows, which the
	// shared model scores.
	Fallback []Fallback `json:"fallback,omitempty"`
	// Ungrouped counts the rows with an empty group cell (they train the
	// shared model only).
	Ungrouped int `json:"ungrouped,omitempty"`
}

// Data is the training file as the fleet saw it.
type Data struct {
	Path string `json:"path"`
	// Fingerprint is the SHA-256 of all the rows read (every group's).
	Fingerprint string `json:"fingerprint"`
	Rows        int    `json:"rows"`
}

// Member is one model of the fleet.
type Member struct {
	Group string `json:"group"`
	// File is the model file's name in the fleet's folder.
	File string `json:"file"`
	// SHA256 is the model file's hash; Open refuses a file that differs.
	SHA256 string `json:"sha256"`
	// Rows the model was trained (and validated) on.
	Rows int `json:"rows"`
	// Epochs trained.
	Epochs int `json:"epochs"`
	// ValidationLoss at the end of training (nil: no validation rows).
	ValidationLoss *float64 `json:"validation_loss,omitempty"`
	// Threshold of the anomaly score (nil: none).
	Threshold *float64 `json:"threshold,omitempty"`
	// Warnings are what training said about this member.
	Warnings []string `json:"warnings,omitempty"`
}

// Fallback is a group without a model of its own.
type Fallback struct {
	Group string `json:"group"`
	Rows  int    `json:"rows"`
}

// SeedFor is group's seed in a fleet trained with seed: a draw of the
// PCG generator seeded with seed on the stream of the group's FNV-1a
// hash. The shared model's seed is SeedFor(seed, "") (no group is named
// by an empty cell).
func SeedFor(seed uint64, group string) uint64 {
	return rand.New(rand.NewPCG(seed, stream.Group^hash64(group))).Uint64()
}

func hash64(s string) uint64 {
	h := fnv.New64a()
	io.WriteString(h, s)
	return h.Sum64()
}

// FileName is the model file's name of group: "g-", the group's name
// with characters other than letters, digits, '.', '-' and '_' replaced
// by '_' (at most 40 bytes of it), '-', 16 hex digits of the name's
// FNV-1a hash, ".qm". Two names that differ only in replaced characters
// still get two files; Plan refuses the rare pair whose hashes agree too.
func FileName(group string) string {
	var b strings.Builder
	b.WriteString("g-")
	for _, r := range group {
		if b.Len() >= 42 {
			break
		}
		switch {
		case r >= 'a' && r <= 'z', r >= 'A' && r <= 'Z', r >= '0' && r <= '9', r == '.', r == '-', r == '_':
			b.WriteRune(r)
		default:
			b.WriteByte('_')
		}
	}
	fmt.Fprintf(&b, "-%016x.qm", hash64(group))
	return b.String()
}

// Shard is one part of an array job: Index counts from 0 to Of-1.
type Shard struct{ Index, Of int }

// All is the single shard of a run that is not split.
var All = Shard{0, 1}

// ParseShard reads "I/N" (0 <= I < N): the array job's index and size.
func ParseShard(s string) (Shard, error) {
	a, b, ok := strings.Cut(strings.TrimSpace(s), "/")
	i, err1 := strconv.Atoi(strings.TrimSpace(a))
	n, err2 := strconv.Atoi(strings.TrimSpace(b))
	if !ok || err1 != nil || err2 != nil {
		return Shard{}, fmt.Errorf("%q: want I/N, this shard's index from 0 and the number of shards (such as 3/8)", s)
	}
	sh := Shard{i, n}
	return sh, sh.check()
}

func (s Shard) check() error {
	if s.Of < 1 || s.Of > 1<<20 || s.Index < 0 || s.Index >= s.Of {
		return fmt.Errorf("%d/%d: want 0 <= I < N, with N at most %d", s.Index, s.Of, 1<<20)
	}
	return nil
}

// String writes the shard as I/N.
func (s Shard) String() string { return fmt.Sprintf("%d/%d", s.Index, s.Of) }

// Owns says whether the shard trains the k-th member (counted in the
// sorted order of the groups with a model of their own): members are
// dealt round the shards like cards, so each shard gets a like share of
// groups whatever their names. The shared model is shard 0's.
func (s Shard) Owns(k int) bool { return k%s.Of == s.Index }

// PartFile is a shard's part of the index.
func (s Shard) PartFile() string { return fmt.Sprintf("part-%d-of-%d.json", s.Index, s.Of) }

// Part is what one shard trained: the index's common fields, its own
// members (and, for shard 0, the shared model), and how many members
// the whole fleet has.
type Part struct {
	Shard Shard `json:"shard"`
	// Groups is the number of members of the whole fleet.
	Groups int   `json:"groups"`
	Index  Index `json:"index"`
}

// Plan deals the groups with at least minRows rows (counts: each group's
// rows) into members, sorted by name, and the rest into fallbacks; it
// refuses two groups whose file names agree.
func Plan(counts map[string]int, minRows int) (members []string, fallback []Fallback, err error) {
	seen := map[string]string{}
	for g, n := range counts {
		if n >= minRows {
			f := FileName(g)
			if other, ok := seen[f]; ok {
				return nil, nil, fmt.Errorf("fleet: groups %q and %q would share the file %s", other, g, f)
			}
			seen[f] = g
			members = append(members, g)
		} else {
			fallback = append(fallback, Fallback{g, n})
		}
	}
	slices.Sort(members)
	slices.SortFunc(fallback, func(a, b Fallback) int { return strings.Compare(a.Group, b.Group) })
	return members, fallback, nil
}

// Marshal writes v as the fleet's JSON: indented, with a final newline.
func marshal(v any) ([]byte, error) {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return nil, err
	}
	return append(b, '\n'), nil
}

// WriteIndex writes dir/fleet.json atomically (a temporary file renamed).
func WriteIndex(dir string, ix *Index) error {
	b, err := marshal(ix)
	if err != nil {
		return fmt.Errorf("fleet: %w", err)
	}
	return WriteFile(filepath.Join(dir, IndexFile), b)
}

// WritePart writes a shard's part into dir atomically.
func WritePart(dir string, p *Part) error {
	b, err := marshal(p)
	if err != nil {
		return fmt.Errorf("fleet: %w", err)
	}
	return WriteFile(filepath.Join(dir, p.Shard.PartFile()), b)
}

// WriteFile writes b to path through a temporary file in its folder,
// synced and renamed over path once complete: a reader sees the old
// file or the new, never half of one, and a crash loses neither.
func WriteFile(path string, b []byte) error {
	tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("fleet: %w", err)
	}
	_, err = tmp.Write(b)
	if err == nil {
		err = tmp.Sync()
	}
	if err2 := tmp.Close(); err == nil {
		err = err2
	}
	if err == nil {
		err = os.Chmod(tmp.Name(), 0o644)
	}
	if err == nil {
		err = os.Rename(tmp.Name(), path)
	}
	if err != nil {
		os.Remove(tmp.Name())
		return fmt.Errorf("fleet: %w", err)
	}
	if d, err := os.Open(filepath.Dir(path)); err == nil {
		d.Sync()
		d.Close()
	}
	return nil
}

// maxIndexBytes bounds an index file read (a fleet of a million members
// with long names and warnings fits).
const maxIndexBytes = 1 << 30

func readJSON(path string, v any) error {
	f, err := os.Open(path)
	if err != nil {
		return &Error{path, "cannot read: " + errText(err)}
	}
	defer f.Close()
	b, err := io.ReadAll(io.LimitReader(f, maxIndexBytes+1))
	if err != nil {
		return &Error{path, "cannot read: " + errText(err)}
	}
	if len(b) > maxIndexBytes {
		return &Error{path, fmt.Sprintf("larger than %d bytes", maxIndexBytes)}
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		return &Error{path, "not a fleet file: " + err.Error()}
	}
	return nil
}

// errText is an os error without the path it repeats.
func errText(err error) string {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err.Error()
	}
	return err.Error()
}

// ReadIndex reads and checks dir/fleet.json.
func ReadIndex(dir string) (*Index, error) {
	path := filepath.Join(dir, IndexFile)
	var ix Index
	if err := readJSON(path, &ix); err != nil {
		if _, serr := os.Stat(path); os.IsNotExist(serr) {
			if parts, _ := partFiles(dir); len(parts) > 0 {
				return nil, &Error{dir, fmt.Sprintf("holds a shard's part (%s), not a fleet: assemble the shards' folders with quern merge -out FLEET FOLDER...", filepath.Base(parts[0]))}
			}
		}
		return nil, err
	}
	if err := ix.check(); err != nil {
		return nil, &Error{path, err.Error()}
	}
	return &ix, nil
}

// check validates an index's own fields: format, version, members sorted
// and distinct, file names those of FileName.
func (ix *Index) check() error {
	if ix.Format != FormatName {
		return fmt.Errorf("format %q, want %q", ix.Format, FormatName)
	}
	if ix.Version != Version {
		return fmt.Errorf("version %d; this quern reads version %d", ix.Version, Version)
	}
	if ix.GroupColumn == "" {
		return errors.New("no group column")
	}
	for i, m := range ix.Members {
		if i > 0 && ix.Members[i-1].Group >= m.Group {
			return fmt.Errorf("members not sorted and distinct at %q", m.Group)
		}
		if m.File != FileName(m.Group) {
			return fmt.Errorf("member %q: file %q, want %q", m.Group, m.File, FileName(m.Group))
		}
	}
	if ix.Shared != nil && ix.Shared.File != SharedFile {
		return fmt.Errorf("shared model file %q, want %q", ix.Shared.File, SharedFile)
	}
	return nil
}

// Hash is the SHA-256 of b in hex, as Member.SHA256 holds it.
func Hash(b []byte) string {
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:])
}

// ReadParts reads every part-*-of-*.json file in the folders.
func ReadParts(dirs ...string) ([]Part, []string, error) {
	var parts []Part
	var from []string
	seen := map[string]bool{}
	for _, dir := range dirs {
		if seen[filepath.Clean(dir)] {
			continue // a folder named twice is read once
		}
		seen[filepath.Clean(dir)] = true
		if st, err := os.Stat(dir); err != nil {
			return nil, nil, &Error{dir, "cannot read: " + errText(err)}
		} else if !st.IsDir() {
			return nil, nil, &Error{dir, "not a folder (name the shards' folders, each holding a part-I-of-N.json)"}
		}
		names, err := partFiles(dir)
		if err != nil {
			return nil, nil, err
		}
		if len(names) == 0 {
			return nil, nil, &Error{dir, "holds no part-I-of-N.json: not the folder of a shard (quern train -group ... -shard I/N writes one)"}
		}
		slices.Sort(names)
		for _, n := range names {
			var p Part
			if err := readJSON(n, &p); err != nil {
				return nil, nil, err
			}
			if filepath.Base(n) != p.Shard.PartFile() {
				return nil, nil, &Error{n, fmt.Sprintf("holds shard %s, whose part is %s", p.Shard, p.Shard.PartFile())}
			}
			parts = append(parts, p)
			from = append(from, dir)
		}
	}
	return parts, from, nil
}

// Merge assembles the index of a fleet from its shards' parts: every
// shard of one run exactly once (a part given twice must be the same),
// their common fields equal, no group trained twice, and the members as
// many as the run planned. The index is the one a single process writes.
func Merge(parts []Part) (*Index, error) {
	if len(parts) == 0 {
		return nil, fmt.Errorf("%w: no parts to merge (a shard writes part-I-of-N.json beside its models)", ErrFleet)
	}
	of := parts[0].Shard.Of
	byShard := make(map[int]*Part, of)
	for i := range parts {
		p := &parts[i]
		if err := p.Shard.check(); err != nil {
			return nil, fmt.Errorf("%w: part of shard %s: %v", ErrFleet, p.Shard, err)
		}
		if p.Shard.Of != of {
			return nil, fmt.Errorf("%w: parts of %d and of %d shards: not one run", ErrFleet, of, p.Shard.Of)
		}
		if prev, ok := byShard[p.Shard.Index]; ok {
			a, _ := marshal(prev)
			b, _ := marshal(p)
			if !bytes.Equal(a, b) {
				return nil, fmt.Errorf("%w: two different parts for shard %s (trained twice with different data or settings?)", ErrFleet, p.Shard)
			}
			continue
		}
		byShard[p.Shard.Index] = p
	}
	var missing []string
	for i := range of {
		if byShard[i] == nil {
			missing = append(missing, strconv.Itoa(i))
		}
	}
	if len(missing) > 0 {
		what := "shard " + missing[0]
		if len(missing) > 1 {
			what = "shards " + strings.Join(missing, ", ")
		}
		return nil, fmt.Errorf("%w: no part of %s (counting from 0, of %d): run it, or name its folder", ErrFleet, what, of)
	}
	first := byShard[0]
	ix := first.Index
	ix.Members, ix.Shared = nil, first.Index.Shared
	head := func(p *Part) []byte {
		c := p.Index
		c.Members, c.Shared = nil, nil
		b, _ := marshal(c)
		return b
	}
	want := head(first)
	for i := range of {
		p := byShard[i]
		if !bytes.Equal(head(p), want) {
			return nil, fmt.Errorf("%w: shard %s was trained on other data or settings than shard %s: %s", ErrFleet, p.Shard, first.Shard, headDiff(&p.Index, &first.Index))
		}
		if p.Groups != first.Groups {
			return nil, fmt.Errorf("%w: shard %s planned %d members, shard %s %d", ErrFleet, p.Shard, p.Groups, first.Shard, first.Groups)
		}
		if i > 0 && p.Index.Shared != nil {
			return nil, fmt.Errorf("%w: shard %s holds a shared model; only shard 0 trains it", ErrFleet, p.Shard)
		}
		ix.Members = append(ix.Members, p.Index.Members...)
	}
	slices.SortFunc(ix.Members, func(a, b Member) int { return strings.Compare(a.Group, b.Group) })
	for i := 1; i < len(ix.Members); i++ {
		if ix.Members[i].Group == ix.Members[i-1].Group {
			return nil, fmt.Errorf("%w: group %q was trained by two shards", ErrFleet, ix.Members[i].Group)
		}
	}
	if len(ix.Members) != first.Groups {
		return nil, fmt.Errorf("%w: the parts hold %d members, the run planned %d", ErrFleet, len(ix.Members), first.Groups)
	}
	if ix.Members == nil {
		ix.Members = []Member{}
	}
	if err := ix.check(); err != nil {
		return nil, fmt.Errorf("%w: %v", ErrFleet, err)
	}
	return &ix, nil
}

// headDiff says where two parts' common fields differ, a's value first.
func headDiff(a, b *Index) string {
	type field struct {
		name string
		a, b any
	}
	for _, f := range []field{
		{"the data's fingerprint", a.Data.Fingerprint, b.Data.Fingerprint},
		{"the data's rows", a.Data.Rows, b.Data.Rows},
		{"the data's file name", a.Data.Path, b.Data.Path},
		{"the group column", a.GroupColumn, b.GroupColumn},
		{"the kind", a.Kind, b.Kind},
		{"the seed", a.Seed, b.Seed},
		{"the training flags", strings.Join(a.Settings, " "), strings.Join(b.Settings, " ")},
		{"-min-rows", a.MinRows, b.MinRows},
		{"the groups with too few rows", len(a.Fallback), len(b.Fallback)},
		{"the rows with no group", a.Ungrouped, b.Ungrouped},
		{"the format", fmt.Sprint(a.Format, a.Version), fmt.Sprint(b.Format, b.Version)},
	} {
		if fmt.Sprint(f.a) != fmt.Sprint(f.b) {
			return fmt.Sprintf("%s (%v, against %v)", f.name, f.a, f.b)
		}
	}
	return "their common fields"
}

// partFiles lists the shards' parts in dir (part-I-of-N.json), sorted.
func partFiles(dir string) ([]string, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, &Error{dir, "cannot read: " + errText(err)}
	}
	var out []string
	for _, e := range ents {
		if n := e.Name(); strings.HasPrefix(n, "part-") && strings.Contains(n, "-of-") && strings.HasSuffix(n, ".json") {
			out = append(out, filepath.Join(dir, n))
		}
	}
	slices.Sort(out)
	return out, nil
}

// memberFile reports whether name is a member model file's name.
func memberFile(name string) bool {
	if !strings.HasPrefix(name, "g-") || !strings.HasSuffix(name, ".qm") || len(name) < 2+1+16+3 {
		return false
	}
	hexPart := name[len(name)-3-16 : len(name)-3]
	for _, c := range hexPart {
		if !(c >= '0' && c <= '9' || c >= 'a' && c <= 'f') {
			return false
		}
	}
	return name[len(name)-3-16-1] == '-'
}

// RemoveOthers removes from dir the member model files (and a shared
// model file) that ix does not name: what an earlier fleet in the same
// folder left. It returns how many it removed.
func RemoveOthers(dir string, ix *Index) (int, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return 0, fmt.Errorf("fleet: %w", err)
	}
	named := map[string]bool{}
	for _, m := range ix.Members {
		named[m.File] = true
	}
	if ix.Shared != nil {
		named[ix.Shared.File] = true
	}
	n := 0
	for _, e := range ents {
		name := e.Name()
		if !e.Type().IsRegular() || named[name] || !(memberFile(name) || name == SharedFile) {
			continue
		}
		if err := os.Remove(filepath.Join(dir, name)); err != nil {
			return n, fmt.Errorf("fleet: %w", err)
		}
		n++
	}
	return n, nil
}
