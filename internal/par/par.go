// Package par splits loops across GOMAXPROCS goroutines. Every element (or
// block, or item) is computed by exactly one goroutine, so results do not
// depend on the number of goroutines.
//
// The work is cut into more chunks than goroutines, and the calling
// goroutine takes chunks too, from a shared counter, alongside the
// helpers it starts: where waking a helper is slow (an idle virtual CPU
// can take a long while to wake), the caller simply does more of the
// chunks itself, so a split loop is never much slower than a plain one.
package par

import (
	"runtime"
	"sync"
	"sync/atomic"
)

// MinWork is the smallest number of elements worth splitting.
const MinWork = 1 << 15

// chunksPer is the number of chunks per goroutine.
const chunksPer = 4

// Worth reports whether For would split n elements; callers on
// allocation-free paths test it before building a closure.
func Worth(n int) bool { return n >= MinWork && runtime.GOMAXPROCS(0) > 1 }

// Items calls f(i) once for each i in [0, n), on the calling goroutine
// and up to GOMAXPROCS-1 helpers, each taking the next unclaimed item;
// it returns when every call has returned. Callers decide whether the
// items are worth sharing.
func Items(n int, f func(i int)) {
	w := min(runtime.GOMAXPROCS(0), n)
	if w < 2 {
		for i := 0; i < n; i++ {
			f(i)
		}
		return
	}
	var next atomic.Int64
	var wg sync.WaitGroup
	wg.Add(n)
	work := func() {
		for {
			i := int(next.Add(1) - 1)
			if i >= n {
				return
			}
			f(i)
			wg.Done()
		}
	}
	for t := 1; t < w; t++ {
		go work()
	}
	work()
	wg.Wait()
}

// For calls f(lo, hi) over [0, n) in contiguous chunks, concurrently when
// n is at least MinWork and more than one processor is available, and
// returns when every call has returned.
func For(n int, f func(lo, hi int)) {
	w := runtime.GOMAXPROCS(0)
	if n < MinWork || w < 2 {
		f(0, n)
		return
	}
	chunks := min(w*chunksPer, n/(MinWork/4))
	chunk := (n + chunks - 1) / chunks
	Items((n+chunk-1)/chunk, func(i int) { f(i*chunk, min((i+1)*chunk, n)) })
}

// Blocks calls f(lo, hi) over [0, n) like For, but with every chunk made
// of whole blocks of the given size (the last block may be short), so
// that per-block partial sums come out the same whatever the number of
// goroutines.
func Blocks(n, block int, f func(lo, hi int)) {
	w := runtime.GOMAXPROCS(0)
	if n < MinWork || w < 2 || block <= 0 {
		f(0, n)
		return
	}
	nb := (n + block - 1) / block
	per := max(1, (nb+w*chunksPer-1)/(w*chunksPer)) // blocks per chunk
	Items((nb+per-1)/per, func(i int) { f(i*per*block, min((i+1)*per*block, n)) })
}

// Spread calls f(lo, hi) over [0, n) in contiguous chunks (at most n),
// concurrently; callers decide with Worth whether the work behind the n
// items is worth it.
func Spread(n int, f func(lo, hi int)) {
	w := runtime.GOMAXPROCS(0)
	if w < 2 || n < 2 {
		f(0, n)
		return
	}
	chunks := min(n, w*chunksPer)
	Items(chunks, func(i int) { f(i*n/chunks, (i+1)*n/chunks) })
}
