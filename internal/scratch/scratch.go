package scratch

import "sync"

// Grow returns s resliced to n elements, or a new slice when s is too
// short. The contents are unspecified.
func Grow[T any](s []T, n int) []T {
	if cap(s) < n {
		return make([]T, n)
	}
	return s[:n]
}

// Pool is a sync.Pool of *W: a workspace per goroutine at a time, made
// with New (or as a zero W) when the pool is empty. The zero Pool is ready.
type Pool[W any] struct {
	p sync.Pool
	// New makes a fresh workspace; nil means new(W).
	New func() *W
}

// Get takes a workspace; give it back with Put.
func (p *Pool[W]) Get() *W {
	if w, ok := p.p.Get().(*W); ok {
		return w
	}
	if p.New != nil {
		return p.New()
	}
	return new(W)
}

// Put returns a workspace taken with Get.
func (p *Pool[W]) Put(w *W) { p.p.Put(w) }
