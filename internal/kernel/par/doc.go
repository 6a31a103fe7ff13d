// Package par splits loops across GOMAXPROCS goroutines. Every element (or
// block, or item) is computed by exactly one goroutine, so results do not
// depend on the number of goroutines.
//
// The work is cut into more chunks than goroutines, and the calling
// goroutine takes chunks too, from a shared counter, alongside a pool of
// helper goroutines that spin for a while between jobs before parking:
// waking a parked goroutine costs the caller several microseconds on a
// virtual machine, and where a helper is late anyway the caller simply
// does more of the chunks itself, so a split loop is never much slower
// than a plain one. Jobs from several goroutines at once are fine: while
// the pool serves one, the others start helpers of their own.
package par
