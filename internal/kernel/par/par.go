package par

import (
	"runtime"
	"sync"
	"sync/atomic"
	"time"
)

// MinWork is the smallest number of elements worth splitting.
const MinWork = 1 << 15

// chunksPer is the number of chunks per goroutine.
const chunksPer = 4

// limit caps Workers (0: no cap).
var limit atomic.Int64

// Limit caps the goroutines the kernels split work over at n (0 or
// less: GOMAXPROCS, the default), for a process that runs many small
// jobs side by side (a fleet's models) and gains nothing from splitting
// each. Results are the same whatever the cap.
func Limit(n int) { limit.Store(int64(max(n, 0))) }

// Workers is the number of goroutines work is split over: GOMAXPROCS,
// or the Limit below it.
func Workers() int {
	w := runtime.GOMAXPROCS(0)
	if l := int(limit.Load()); l > 0 && l < w {
		return l
	}
	return w
}

// Worth reports whether For would split n elements; callers on
// allocation-free paths test it before building a closure.
func Worth(n int) bool { return n >= MinWork && Workers() > 1 }

// Items calls f(i) once for each i in [0, n), on the calling goroutine
// and up to GOMAXPROCS-1 helpers, each taking the next unclaimed item;
// it returns when every call has returned. Callers decide whether the
// items are worth sharing.
func Items(n int, f func(i int)) {
	w := min(Workers(), n)
	if w < 2 {
		for i := 0; i < n; i++ {
			f(i)
		}
		return
	}
	j := &job{n: int64(n), f: f}
	if !helpers.busy.CompareAndSwap(false, true) {
		// another goroutine's job holds the helpers: start our own
		for t := 1; t < w; t++ {
			go j.work()
		}
		j.work()
		j.wait()
		return
	}
	helpers.start(w - 1)
	helpers.cur.Store(j)
	if p := int(helpers.parked.Load()); p > 0 {
		for i := 0; i < min(p, w-1); i++ {
			select {
			case helpers.wake <- struct{}{}:
			default:
			}
		}
	}
	j.work()
	j.wait()
	helpers.cur.Store(nil)
	helpers.busy.Store(false)
}

// job is one call of Items.
type job struct {
	n          int64
	next, done atomic.Int64
	f          func(int)
}

func (j *job) work() {
	for {
		i := j.next.Add(1) - 1
		if i >= j.n {
			return
		}
		j.f(int(i))
		j.done.Add(1)
	}
}

// wait returns when every item is done (the caller has run out of items
// to take; what remains is at most one item per helper).
func (j *job) wait() {
	for spins := 0; j.done.Load() < j.n; spins++ {
		if spins&63 == 63 {
			runtime.Gosched()
		}
	}
}

// helperPool holds goroutines that take items of the current job. Between
// jobs each spins for spinFor before parking: a parked helper must be
// woken through the operating system, which on a virtual machine costs
// the caller several microseconds per job, and a training step runs
// dozens of jobs a few tens of microseconds apart.
type helperPool struct {
	mu     sync.Mutex
	size   int
	busy   atomic.Bool
	cur    atomic.Pointer[job]
	parked atomic.Int32
	wake   chan struct{}
}

var helpers = helperPool{wake: make(chan struct{}, 256)}

const spinFor = 200 * time.Microsecond

// start makes sure at least k helpers run (at most 255).
func (h *helperPool) start(k int) {
	k = min(k, cap(h.wake)-1)
	h.mu.Lock()
	for ; h.size < k; h.size++ {
		go h.loop()
	}
	h.mu.Unlock()
}

func (h *helperPool) loop() {
	for {
		if j := h.cur.Load(); j != nil && j.next.Load() < j.n {
			j.work()
			continue
		}
		if h.spin() {
			continue
		}
		h.parked.Add(1)
		if j := h.cur.Load(); j != nil && j.next.Load() < j.n {
			h.parked.Add(-1)
			continue
		}
		<-h.wake
		h.parked.Add(-1)
	}
}

// spin waits up to spinFor for a job with items left.
func (h *helperPool) spin() bool {
	deadline := time.Now().Add(spinFor)
	for i := 0; ; i++ {
		if j := h.cur.Load(); j != nil && j.next.Load() < j.n {
			return true
		}
		if i&255 == 255 && time.Now().After(deadline) {
			return false
		}
	}
}

// For calls f(lo, hi) over [0, n) in contiguous chunks, concurrently when
// n is at least MinWork and more than one processor is available, and
// returns when every call has returned.
func For(n int, f func(lo, hi int)) {
	w := Workers()
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
	w := Workers()
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
	w := Workers()
	if w < 2 || n < 2 {
		f(0, n)
		return
	}
	chunks := min(n, w*chunksPer)
	Items(chunks, func(i int) { f(i*n/chunks, (i+1)*n/chunks) })
}
