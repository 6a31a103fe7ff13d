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
