// Package par splits element-wise loops across GOMAXPROCS goroutines.
// Every element is computed by exactly one goroutine, so results do not
// depend on the number of goroutines.
package par

import (
	"runtime"
	"sync"
)

// MinWork is the smallest number of elements worth splitting.
const MinWork = 1 << 15

// Worth reports whether For would split n elements; callers on
// allocation-free paths test it before building a closure.
func Worth(n int) bool { return n >= MinWork && runtime.GOMAXPROCS(0) > 1 }

// For calls f(lo, hi) over [0, n) in contiguous chunks, concurrently when
// n is at least MinWork and more than one processor is available, and
// returns when every call has returned.
func For(n int, f func(lo, hi int)) {
	w := runtime.GOMAXPROCS(0)
	if n < MinWork || w < 2 {
		f(0, n)
		return
	}
	w = min(w, n/(MinWork/2))
	chunk := (n + w - 1) / w
	var wg sync.WaitGroup
	for lo := chunk; lo < n; lo += chunk {
		wg.Add(1)
		go func(lo, hi int) {
			defer wg.Done()
			f(lo, hi)
		}(lo, min(lo+chunk, n))
	}
	f(0, min(chunk, n))
	wg.Wait()
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
	w = min(w, nb)
	per := (nb + w - 1) / w
	var wg sync.WaitGroup
	for b := per; b < nb; b += per {
		wg.Add(1)
		go func(lo, hi int) {
			defer wg.Done()
			f(lo, hi)
		}(b*block, min((b+per)*block, n))
	}
	f(0, min(per*block, n))
	wg.Wait()
}

// Spread calls f(lo, hi) over [0, n) in one contiguous chunk per
// processor (at most n chunks), concurrently; callers decide with Worth
// whether the work behind the n items is worth it.
func Spread(n int, f func(lo, hi int)) {
	w := min(runtime.GOMAXPROCS(0), n)
	if w < 2 {
		f(0, n)
		return
	}
	var wg sync.WaitGroup
	for t := 1; t < w; t++ {
		wg.Add(1)
		go func(lo, hi int) {
			defer wg.Done()
			f(lo, hi)
		}(t*n/w, (t+1)*n/w)
	}
	f(0, n/w)
	wg.Wait()
}
