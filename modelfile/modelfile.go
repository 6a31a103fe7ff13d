package modelfile

import (
	"bufio"
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"time"
)

// Magic opens every quern model file.
var Magic = [8]byte{'Q', 'U', 'E', 'R', 'N', 'M', 'D', 'L'}

// Version is the highest format version this package reads and writes.
// Version 1 is the layout below. Version 2 has the same layout and marks a
// file whose metadata a version-1 reader would misread: an autoencoder
// with a score profile, whose profile an older build ignores, scoring
// every row differently, or with categories reconstructed by a softmax,
// whose logits an older build would take for the reconstruction. Older builds refuse such a file (ErrVersion)
// instead. A writer writes the least version its content needs
// (File.Version), so other files stay readable by older builds.
const Version = 2

// Limits a reader enforces before allocating.
const (
	MaxMetaBytes = 16 << 20
	MaxNameBytes = 1024
	MaxTensors   = 1 << 16
)

// Tensor dtypes.
const (
	Float32 uint8 = 1
	Float64 uint8 = 2
)

// Tensor is one named matrix. Exactly one of F32 and F64 holds its values.
type Tensor struct {
	Name       string
	Rows, Cols int
	F32        []float32
	F64        []float64
}

// File is a model file's content: a kind ("ae", "vae", "gan", or a
// checkpoint of one), JSON metadata, and named tensors.
type File struct {
	Kind    string
	Meta    json.RawMessage
	Tensors []Tensor
	// Version is the format version Decode read, or the least version
	// the content needs when encoding (0 means 1).
	Version uint16
}

// Tensor returns the tensor with the given name.
func (f *File) Tensor(name string) (*Tensor, bool) {
	for i := range f.Tensors {
		if f.Tensors[i].Name == name {
			return &f.Tensors[i], true
		}
	}
	return nil, false
}

// CorruptError reports a file that is not a valid model file: its path,
// the byte offset where reading failed, and why.
type CorruptError struct {
	Path   string
	Offset int64
	Msg    string
}

func (e *CorruptError) Error() string {
	return fmt.Sprintf("modelfile: %s: corrupt at byte %d: %s", e.Path, e.Offset, e.Msg)
}

// ErrVersion is wrapped when a file was written by a newer format version.
var ErrVersion = errors.New("modelfile: file written by a newer format version")

// header layout: magic (8) | version u16 | kind length u16 | kind |
// meta length u32 | meta | tensor count u32 | tensors | sha256 (32) of all
// preceding bytes. Tensor: name length u16 | name | rows u32 | cols u32 |
// dtype u8 | values little-endian. All integers little-endian.

// Encode writes f to w in the model-file format.
func Encode(w io.Writer, f *File) error {
	if len(f.Kind) > MaxNameBytes || len(f.Meta) > MaxMetaBytes || len(f.Tensors) > MaxTensors {
		return fmt.Errorf("modelfile: kind, metadata or tensor count over the format's limits")
	}
	h := sha256.New()
	bw := bufio.NewWriter(io.MultiWriter(w, h))
	le := binary.LittleEndian
	var b [8]byte
	v := max(f.Version, 1)
	if v > Version {
		return fmt.Errorf("modelfile: version %d asked for, this build writes up to %d", v, Version)
	}
	bw.Write(Magic[:])
	le.PutUint16(b[:], v)
	bw.Write(b[:2])
	le.PutUint16(b[:], uint16(len(f.Kind)))
	bw.Write(b[:2])
	bw.WriteString(f.Kind)
	le.PutUint32(b[:], uint32(len(f.Meta)))
	bw.Write(b[:4])
	bw.Write(f.Meta)
	le.PutUint32(b[:], uint32(len(f.Tensors)))
	bw.Write(b[:4])
	for _, t := range f.Tensors {
		if len(t.Name) == 0 || len(t.Name) > MaxNameBytes {
			return fmt.Errorf("modelfile: tensor name %q length out of range", t.Name)
		}
		n := t.Rows * t.Cols
		if t.Rows <= 0 || t.Cols <= 0 || (len(t.F32) != n) == (len(t.F64) != n) {
			return fmt.Errorf("modelfile: tensor %q: %dx%d with %d float32 and %d float64 values", t.Name, t.Rows, t.Cols, len(t.F32), len(t.F64))
		}
		le.PutUint16(b[:], uint16(len(t.Name)))
		bw.Write(b[:2])
		bw.WriteString(t.Name)
		le.PutUint32(b[:], uint32(t.Rows))
		bw.Write(b[:4])
		le.PutUint32(b[:], uint32(t.Cols))
		bw.Write(b[:4])
		if t.F32 != nil {
			bw.WriteByte(Float32)
			for _, v := range t.F32 {
				le.PutUint32(b[:], math.Float32bits(v))
				bw.Write(b[:4])
			}
		} else {
			bw.WriteByte(Float64)
			for _, v := range t.F64 {
				le.PutUint64(b[:], math.Float64bits(v))
				bw.Write(b[:8])
			}
		}
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("modelfile: %w", err)
	}
	_, err := w.Write(h.Sum(nil))
	if err != nil {
		return fmt.Errorf("modelfile: %w", err)
	}
	return nil
}

// Decode parses a whole model file held in b; path is used in errors. It
// never allocates more than the input's size justifies and never panics.
func Decode(b []byte, path string) (*File, error) {
	bad := func(off int, format string, args ...any) error {
		return &CorruptError{Path: path, Offset: int64(off), Msg: fmt.Sprintf(format, args...)}
	}
	if len(b) < 8+2+2+4+4+32 {
		return nil, bad(0, "%d bytes is too short for a model file", len(b))
	}
	if !bytes.Equal(b[:8], Magic[:]) {
		return nil, bad(0, "not a quern model file")
	}
	le := binary.LittleEndian
	v := le.Uint16(b[8:])
	body, sum := b[:len(b)-32], b[len(b)-32:]
	got := sha256.Sum256(body)
	if !bytes.Equal(got[:], sum) {
		if v > Version {
			return nil, bad(len(body), "checksum mismatch (truncated or altered, or written by a newer format version %d)", v)
		}
		return nil, bad(len(body), "checksum mismatch (truncated or altered)")
	}
	if v > Version {
		return nil, fmt.Errorf("%w: %s has version %d, this build reads up to %d", ErrVersion, path, v, Version)
	}
	if v == 0 {
		return nil, bad(8, "version 0")
	}
	p := 10
	need := func(n int) bool { return n >= 0 && p+n <= len(body) }
	if !need(2) {
		return nil, bad(p, "missing kind")
	}
	kl := int(le.Uint16(body[p:]))
	p += 2
	if kl > MaxNameBytes || !need(kl) {
		return nil, bad(p, "kind length %d", kl)
	}
	f := &File{Kind: string(body[p : p+kl]), Version: v}
	p += kl
	if !need(4) {
		return nil, bad(p, "missing metadata length")
	}
	ml := int(le.Uint32(body[p:]))
	p += 4
	if ml > MaxMetaBytes || !need(ml) {
		return nil, bad(p, "metadata length %d exceeds the file", ml)
	}
	f.Meta = append(json.RawMessage(nil), body[p:p+ml]...)
	if ml > 0 && !json.Valid(f.Meta) {
		return nil, bad(p, "metadata is not valid JSON")
	}
	p += ml
	if !need(4) {
		return nil, bad(p, "missing tensor count")
	}
	nt := int(le.Uint32(body[p:]))
	p += 4
	// each tensor takes at least 2+1+4+4+1+4 bytes
	if nt > MaxTensors || nt*16 > len(body)-p {
		return nil, bad(p, "tensor count %d exceeds the file", nt)
	}
	seen := map[string]bool{}
	for i := 0; i < nt; i++ {
		if !need(2) {
			return nil, bad(p, "tensor %d: truncated", i)
		}
		nl := int(le.Uint16(body[p:]))
		p += 2
		if nl == 0 || nl > MaxNameBytes || !need(nl+9) {
			return nil, bad(p, "tensor %d: name length %d", i, nl)
		}
		t := Tensor{Name: string(body[p : p+nl])}
		p += nl
		if seen[t.Name] {
			return nil, bad(p, "duplicate tensor %q", t.Name)
		}
		seen[t.Name] = true
		rows, cols := int64(le.Uint32(body[p:])), int64(le.Uint32(body[p+4:]))
		dt := body[p+8]
		p += 9
		size := int64(4)
		if dt == Float64 {
			size = 8
		} else if dt != Float32 {
			return nil, bad(p-1, "tensor %q: unknown dtype %d", t.Name, dt)
		}
		if rows == 0 || cols == 0 || rows*cols > int64(len(body)-p)/size {
			return nil, bad(p, "tensor %q: shape %dx%d exceeds the file", t.Name, rows, cols)
		}
		t.Rows, t.Cols = int(rows), int(cols)
		n := t.Rows * t.Cols
		if dt == Float32 {
			t.F32 = make([]float32, n)
			for k := range t.F32 {
				t.F32[k] = math.Float32frombits(le.Uint32(body[p+4*k:]))
			}
		} else {
			t.F64 = make([]float64, n)
			for k := range t.F64 {
				t.F64[k] = math.Float64frombits(le.Uint64(body[p+8*k:]))
			}
		}
		p += n * int(size)
		f.Tensors = append(f.Tensors, t)
	}
	if p != len(body) {
		return nil, bad(p, "%d unexpected bytes after the tensors", len(body)-p)
	}
	return f, nil
}

// Read loads and checks a model file. The file's size bounds everything
// read; a file over limit bytes (0 means 4 GiB) is refused.
func Read(path string, limit int64) (*File, error) {
	if limit <= 0 {
		limit = 4 << 30
	}
	fh, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("modelfile: %s: %w", path, pathCause(err))
	}
	defer fh.Close()
	st, err := fh.Stat()
	if err != nil {
		return nil, fmt.Errorf("modelfile: %s: %w", path, pathCause(err))
	}
	if st.IsDir() {
		return nil, fmt.Errorf("modelfile: %s is a folder, not a model file", path)
	}
	if st.Size() > limit {
		return nil, &CorruptError{Path: path, Msg: fmt.Sprintf("file is %d bytes, over the %d-byte limit", st.Size(), limit)}
	}
	b := make([]byte, st.Size())
	if _, err := io.ReadFull(fh, b); err != nil {
		return nil, fmt.Errorf("modelfile: %s: %w", path, err)
	}
	return Decode(b, path)
}

// Write stores f at path atomically: it writes a temporary file in the same
// folder, syncs it, renames it over path and syncs the folder, so a crash
// at any point leaves either the old file or the new one, never a mix.
//
// A file written over keeps its permissions; a new one is readable by all
// (0644). Temporary files of the same path left by a write that crashed
// (a process killed while saving) are removed once they are older than
// StaleAfter.
func Write(path string, f *File) error {
	return write(path, f, true)
}

// WriteUnsynced is Write without waiting for the disk: the file is
// replaced atomically, but a crash soon after may lose it. A caller that
// writes many files (a fleet's) syncs them together afterwards (Sync),
// which costs far less wall time than one sync after each, and removes
// the leftovers of crashed writes once (RemoveStale) where Write looks
// for its own file's each time.
func WriteUnsynced(path string, f *File) error {
	return write(path, f, false)
}

// Sync waits until the named files and their folders are on disk,
// syncing several at once.
func Sync(paths ...string) error {
	dirs := map[string]bool{}
	errs := make([]error, len(paths))
	var wg sync.WaitGroup
	sem := make(chan struct{}, syncAtOnce)
	for i, p := range paths {
		dirs[filepath.Dir(p)] = true
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer wg.Done()
			defer func() { <-sem }()
			fh, err := os.Open(p)
			if err == nil {
				err = fh.Sync()
				fh.Close()
			}
			errs[i] = err
		}()
	}
	wg.Wait()
	for _, err := range errs {
		if err != nil {
			return fmt.Errorf("modelfile: %w", err)
		}
	}
	for d := range dirs {
		if fh, err := os.Open(d); err == nil {
			fh.Sync()
			fh.Close()
		}
	}
	return nil
}

// syncAtOnce is how many files Sync syncs at a time: enough for the
// file system to commit them together.
const syncAtOnce = 64

func write(path string, f *File, durable bool) error {
	dir := filepath.Dir(path)
	if durable {
		// (a writer of many files calls RemoveStale once for the folder:
		// each call reads the whole folder)
		removeStale(dir, filepath.Base(path))
	}
	mode := os.FileMode(0o644)
	if st, err := os.Stat(path); err == nil && st.Mode().IsRegular() {
		mode = st.Mode().Perm()
	}
	tmp, err := os.CreateTemp(dir, "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("modelfile: %w", err)
	}
	name := tmp.Name()
	if err := tmp.Chmod(mode); err != nil {
		tmp.Close()
		os.Remove(name)
		return fmt.Errorf("modelfile: %w", err)
	}
	ok := false
	defer func() {
		if !ok {
			tmp.Close()
			os.Remove(name)
		}
	}()
	if err := Encode(tmp, f); err != nil {
		return err
	}
	if durable {
		if err := tmp.Sync(); err != nil {
			return fmt.Errorf("modelfile: %w", err)
		}
	}
	if err := tmp.Close(); err != nil {
		return fmt.Errorf("modelfile: %w", err)
	}
	if err := beforeRename(name); err != nil {
		return err
	}
	if err := os.Rename(name, path); err != nil {
		return fmt.Errorf("modelfile: %w", err)
	}
	ok = true
	if !durable {
		return nil
	}
	if d, err := os.Open(dir); err == nil {
		d.Sync()
		d.Close()
	}
	return nil
}

// StaleAfter is the age past which Write takes a temporary file of the
// path it writes for the leftover of a crashed write. A write under way
// keeps its temporary file younger than this (it writes, then syncs and
// renames at once), so two processes writing one path do not remove each
// other's files.
const StaleAfter = 10 * time.Minute

// removeStale removes the temporary files of base in dir older than
// StaleAfter; failures are ignored (the files are only clutter).
func removeStale(dir, base string) {
	old, _ := filepath.Glob(filepath.Join(dir, "."+globEscape(base)+".tmp-*"))
	for _, p := range old {
		if st, err := os.Lstat(p); err == nil && st.Mode().IsRegular() && time.Since(st.ModTime()) > StaleAfter {
			os.Remove(p)
		}
	}
}

// RemoveStale removes every model file's leftover temporary file in dir
// older than StaleAfter, in one read of the folder: what Write does for
// its one file, for a caller of WriteUnsynced that writes many.
func RemoveStale(dir string) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return
	}
	for _, e := range ents {
		n := e.Name()
		if !strings.HasPrefix(n, ".") || !strings.Contains(n, ".tmp-") || !e.Type().IsRegular() {
			continue
		}
		if st, err := e.Info(); err == nil && time.Since(st.ModTime()) > StaleAfter {
			os.Remove(filepath.Join(dir, n))
		}
	}
}

// globEscape quotes the pattern characters of a file name.
func globEscape(s string) string {
	var b strings.Builder
	for _, r := range s {
		if strings.ContainsRune(`*?[\`, r) {
			b.WriteByte('\\')
		}
		b.WriteRune(r)
	}
	return b.String()
}

// beforeRename is a test hook that simulates a crash between writing the
// temporary file and renaming it.
var beforeRename = func(string) error { return nil }

func sha256Sum(b []byte) []byte {
	s := sha256.Sum256(b)
	return s[:]
}

// pathCause is the cause inside an *fs.PathError (which would repeat the
// operation and the path), still matching errors.Is(err, fs.ErrNotExist).
func pathCause(err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}
