package fleet

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"sync"
	"sync/atomic"

	"github.com/quernlab/quern/model"
)

// maxModelBytes bounds one member file read (as model.Open does).
const maxModelBytes = 1 << 30

// Entry is one opened member: its group ("" for the shared model), its
// record in the index, and the value the opener made of its file.
type Entry[T any] struct {
	Group  string
	Member Member
	Value  T
}

// Fleet is an opened fleet: every member's file read once, checked
// against the index and opened. Route, Shared, Any, Len and Index are
// safe for concurrent use, also while Reload runs; a request that routed
// before a reload finishes with the model it got.
type Fleet[T any] struct {
	dir   string
	open  func(b []byte, path string) (T, error)
	state atomic.Pointer[state[T]]
	mu    sync.Mutex // one Reload at a time
}

type state[T any] struct {
	index   *Index
	members map[string]*Entry[T]
	shared  *Entry[T]
}

// Open opens the fleet in dir for inference, each member with model.Open's
// reading of a model file.
func Open(dir string) (*Fleet[model.Model], error) {
	return OpenWith(dir, model.Decode)
}

// OpenWith opens the fleet in dir with open turning each member's file
// (its bytes and path) into a T: the HTTP server's loaded model, say.
// Every file must match its hash in the index: a fleet whose files were
// mixed from two runs is refused, never served.
func OpenWith[T any](dir string, open func(b []byte, path string) (T, error)) (*Fleet[T], error) {
	f := &Fleet[T]{dir: dir, open: open}
	st, err := f.load(nil, "")
	if err != nil {
		return nil, err
	}
	f.state.Store(st)
	return f, nil
}

// Dir is the fleet's folder.
func (f *Fleet[T]) Dir() string { return f.dir }

// Index is the index the open members came from.
func (f *Fleet[T]) Index() *Index { return f.state.Load().index }

// Len is the number of members (the shared model not counted).
func (f *Fleet[T]) Len() int { return len(f.state.Load().members) }

// Route returns the model for group: its own, or else the shared model
// (shared true); ok is false when there is neither.
func (f *Fleet[T]) Route(group string) (e *Entry[T], shared, ok bool) {
	st := f.state.Load()
	if e, ok := st.members[group]; ok {
		return e, false, true
	}
	// a group with no model of its own, an empty cell or a missing-value
	// marker (which named no group in training): the shared model
	if st.shared != nil {
		return st.shared, true, true
	}
	return nil, false, false
}

// Batch is the rows of a call that go to one model: its entry, whether
// it is the shared model, and the rows' places in the call.
type Batch[T any] struct {
	Entry  *Entry[T]
	Shared bool
	Rows   []int
}

// Deal routes n rows by their groups (key(i) is row i's) as Route does,
// all of them by the same loaded members, and returns a batch per model
// in the order each model is first met, and the rows with no model (a
// group of none of its own in a fleet without a shared model).
func (f *Fleet[T]) Deal(n int, key func(i int) string) (batches []*Batch[T], none []int) {
	st := f.state.Load()
	byEntry := map[*Entry[T]]*Batch[T]{}
	for i := range n {
		e, shared := st.members[key(i)], false
		if e == nil {
			e, shared = st.shared, true
		}
		if e == nil {
			none = append(none, i)
			continue
		}
		b := byEntry[e]
		if b == nil {
			b = &Batch[T]{Entry: e, Shared: shared}
			byEntry[e] = b
			batches = append(batches, b)
		}
		b.Rows = append(b.Rows, i)
	}
	return batches, none
}

// Shared is the shared model, or nil.
func (f *Fleet[T]) Shared() *Entry[T] { return f.state.Load().shared }

// Any returns one entry (the shared model, else the first member): what
// the fleet's members have in common, such as their kind and columns.
func (f *Fleet[T]) Any() *Entry[T] {
	st := f.state.Load()
	if st.shared != nil {
		return st.shared
	}
	if len(st.index.Members) > 0 {
		return st.members[st.index.Members[0].Group]
	}
	return nil
}

// Reloaded says what a reload changed.
type Reloaded struct {
	// Opened counts the members read again (new or changed files);
	// Kept those whose files had not changed.
	Opened, Kept int
	// Removed counts members no longer in the index.
	Removed int
}

// Reload reads the index again and every member's file, opens the
// members whose hash changed (or that are new) and keeps the others as
// they are; members the index no longer names are dropped. With group set, only that member (or,
// with group "" and shared, the shared model) is read again, the rest
// kept as they were loaded. Anything wrong (an index that does not
// parse, a file whose hash is not the index's, a model the opener
// refuses) refuses the whole reload and
// the fleet keeps serving what it had.
func (f *Fleet[T]) Reload(group string, shared bool) (Reloaded, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	old := f.state.Load()
	var only *string
	if group != "" || shared {
		only = &group
	}
	st, err := f.load(old, derefOr(only))
	if err != nil {
		return Reloaded{}, err
	}
	if only != nil {
		// one member: the rest stay exactly as loaded, index included
		next := &state[T]{index: old.index, members: old.members, shared: old.shared}
		if shared {
			if st.shared == nil {
				return Reloaded{}, fmt.Errorf("%w: the index names no shared model", ErrFleet)
			}
			next.shared = st.shared
		} else {
			e, ok := st.members[group]
			if !ok {
				return Reloaded{}, fmt.Errorf("%w: the index has no member %q", ErrFleet, group)
			}
			next.members = make(map[string]*Entry[T], len(old.members))
			for k, v := range old.members {
				next.members[k] = v
			}
			next.members[group] = e
		}
		f.state.Store(next)
		kept := len(next.members) + btoi(next.shared != nil) - 1
		return Reloaded{Opened: 1, Kept: kept}, nil
	}
	r := Reloaded{}
	for g, e := range st.members {
		if o, ok := old.members[g]; ok && o == e {
			r.Kept++
		} else {
			r.Opened++
		}
	}
	for g := range old.members {
		if _, ok := st.members[g]; !ok {
			r.Removed++
		}
	}
	if old.shared != nil && st.shared == nil {
		r.Removed++
	}
	f.state.Store(st)
	return r, nil
}

func derefOr(p *string) string {
	if p == nil {
		return "\x00all"
	}
	return *p
}

func btoi(b bool) int {
	if b {
		return 1
	}
	return 0
}

// load reads the index and opens members: all of them when old is nil;
// else those whose hash differs from old's (only names one member, or
// "\x00all" for every one). Unchanged members are old's entries.
func (f *Fleet[T]) load(old *state[T], only string) (*state[T], error) {
	ix, err := ReadIndex(f.dir)
	if err != nil {
		return nil, err
	}
	if len(ix.Members) == 0 && ix.Shared == nil {
		return nil, &Error{filepath.Join(f.dir, IndexFile), "names no model"}
	}
	st := &state[T]{index: ix, members: make(map[string]*Entry[T], len(ix.Members))}
	want := func(group string, m Member, prev *Entry[T]) bool {
		if old == nil {
			return true
		}
		if only != "\x00all" {
			return group == only
		}
		return prev == nil || prev.Member.SHA256 != m.SHA256
	}
	// the members to open, opened side by side on the cores (each file
	// is read, hashed and decoded on its own)
	// a full reload reads every file: one whose hash no longer matches
	// the index is refused even if the index did not change
	verify := old != nil && only == "\x00all"
	var todo []int
	keep := map[int]*Entry[T]{} // members kept as loaded, once their file checks
	for i, m := range ix.Members {
		var prev *Entry[T]
		if old != nil {
			prev = old.members[m.Group]
		}
		if !want(m.Group, m, prev) {
			if prev != nil {
				st.members[m.Group] = prev
				if verify {
					keep[i] = prev
					todo = append(todo, i)
				}
			}
			continue
		}
		todo = append(todo, i)
	}
	opened := make([]*Entry[T], len(todo))
	errs := make([]error, len(todo))
	var next atomic.Int64
	var wg sync.WaitGroup
	for range max(1, min(runtime.GOMAXPROCS(0), len(todo))) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				k := int(next.Add(1)) - 1
				if k >= len(todo) {
					return
				}
				m := ix.Members[todo[k]]
				if prev := keep[todo[k]]; prev != nil {
					opened[k], errs[k] = prev, f.check(m)
					continue
				}
				opened[k], errs[k] = f.openMember(m.Group, m)
			}
		}()
	}
	wg.Wait()
	for k, i := range todo {
		if errs[k] != nil {
			return nil, errs[k] // the first in the index's order
		}
		st.members[ix.Members[i].Group] = opened[k]
	}
	if ix.Shared != nil {
		var prev *Entry[T]
		if old != nil {
			prev = old.shared
		}
		if want("", *ix.Shared, prev) {
			if st.shared, err = f.openMember("", *ix.Shared); err != nil {
				return nil, err
			}
		} else {
			if verify {
				if err := f.check(*ix.Shared); err != nil {
					return nil, err
				}
			}
			st.shared = prev
		}
	}
	return st, nil
}

// check reads a member's file and compares its hash with the index's.
func (f *Fleet[T]) check(m Member) error {
	_, err := f.read(m)
	return err
}

// read reads a member's file, checked against the index's hash.
func (f *Fleet[T]) read(m Member) ([]byte, error) {
	path := filepath.Join(f.dir, m.File)
	b, err := readFile(path)
	if err != nil {
		return nil, err
	}
	if h := Hash(b); h != m.SHA256 {
		return nil, &Error{path, fmt.Sprintf("its SHA-256 is %.12s..., the index says %.12s... (a file from another run, or changed after the index was written)", h, m.SHA256)}
	}
	return b, nil
}

func (f *Fleet[T]) openMember(group string, m Member) (*Entry[T], error) {
	path := filepath.Join(f.dir, m.File)
	b, err := f.read(m)
	if err != nil {
		return nil, err
	}
	v, err := f.open(b, path)
	if err != nil {
		return nil, err
	}
	return &Entry[T]{Group: group, Member: m, Value: v}, nil
}

func readFile(path string) ([]byte, error) {
	fh, err := os.Open(path)
	if err != nil {
		return nil, &Error{path, "cannot read: " + errText(err)}
	}
	defer fh.Close()
	b, err := io.ReadAll(io.LimitReader(fh, maxModelBytes+1))
	if err != nil {
		return nil, &Error{path, "cannot read: " + errText(err)}
	}
	if len(b) > maxModelBytes {
		return nil, &Error{path, fmt.Sprintf("larger than %d bytes", maxModelBytes)}
	}
	return b, nil
}
