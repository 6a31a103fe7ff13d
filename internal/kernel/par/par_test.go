package par

import (
	"runtime"
	"sync/atomic"
	"testing"

	"github.com/stretchr/testify/require"
)

func TestForCoversEveryIndexOnce(t *testing.T) {
	for _, procs := range []int{1, 2, 3} {
		old := runtime.GOMAXPROCS(procs)
		for _, n := range []int{0, 1, MinWork - 1, MinWork, 3*MinWork + 7} {
			hits := make([]int32, n)
			For(n, func(lo, hi int) {
				for i := lo; i < hi; i++ {
					atomic.AddInt32(&hits[i], 1)
				}
			})
			for i, h := range hits {
				require.Equal(t, int32(1), h, "n=%d i=%d procs=%d", n, i, procs)
			}
		}
		runtime.GOMAXPROCS(old)
	}
}

func TestBlocksAlignsChunks(t *testing.T) {
	for _, procs := range []int{1, 2, 3, 5} {
		old := runtime.GOMAXPROCS(procs)
		for _, n := range []int{0, 5, MinWork, 3*MinWork + 7} {
			const block = 1000
			hits := make([]int32, n)
			Blocks(n, block, func(lo, hi int) {
				if lo%block != 0 || (hi%block != 0 && hi != n) {
					t.Errorf("chunk [%d,%d) is not made of whole blocks", lo, hi)
				}
				for i := lo; i < hi; i++ {
					atomic.AddInt32(&hits[i], 1)
				}
			})
			for i, h := range hits {
				require.Equal(t, int32(1), h, "n=%d i=%d procs=%d", n, i, procs)
			}
		}
		runtime.GOMAXPROCS(old)
	}
}

func TestSpreadCoversEveryIndexOnce(t *testing.T) {
	for _, procs := range []int{1, 2, 3} {
		old := runtime.GOMAXPROCS(procs)
		for _, n := range []int{0, 1, 2, 7, 100} {
			hits := make([]int32, n)
			Spread(n, func(lo, hi int) {
				for i := lo; i < hi; i++ {
					atomic.AddInt32(&hits[i], 1)
				}
			})
			for i, h := range hits {
				require.Equal(t, int32(1), h, "n=%d i=%d procs=%d", n, i, procs)
			}
		}
		runtime.GOMAXPROCS(old)
	}
}

func TestItemsCoversEveryItemOnce(t *testing.T) {
	for _, procs := range []int{1, 2, 4} {
		old := runtime.GOMAXPROCS(procs)
		for _, n := range []int{0, 1, 3, 50} {
			hits := make([]int32, n)
			Items(n, func(i int) { atomic.AddInt32(&hits[i], 1) })
			for i, h := range hits {
				require.Equal(t, int32(1), h, "n=%d i=%d procs=%d", n, i, procs)
			}
		}
		runtime.GOMAXPROCS(old)
	}
}

func TestLimit(t *testing.T) {
	defer Limit(0)
	Limit(1)
	if Workers() != 1 || Worth(1<<20) {
		t.Fatalf("Limit(1): %d workers, worth splitting %v", Workers(), Worth(1<<20))
	}
	calls := 0
	For(1<<20, func(lo, hi int) { calls++ }) // one goroutine: no race
	if calls != 1 {
		t.Fatalf("Limit(1): For split the work into %d calls", calls)
	}
	Limit(0)
	if Workers() != runtime.GOMAXPROCS(0) {
		t.Fatalf("Limit(0): %d workers, GOMAXPROCS %d", Workers(), runtime.GOMAXPROCS(0))
	}
}
