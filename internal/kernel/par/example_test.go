package par_test

import (
	"fmt"

	"github.com/quernlab/quern/internal/kernel/par"
)

// Per-block partial sums added in order give the same total whatever the
// number of goroutines that computed the blocks.
func ExampleBlocks() {
	const n, block = 100000, 4096
	x := make([]float64, n)
	for i := range x {
		x[i] = float64(i % 7)
	}
	part := make([]float64, (n+block-1)/block)
	par.Blocks(n, block, func(lo, hi int) {
		for b := lo; b < hi; b += block {
			for _, v := range x[b:min(b+block, hi)] {
				part[b/block] += v
			}
		}
	})
	var s float64
	for _, p := range part {
		s += p
	}
	fmt.Println(s)
	// Output: 299995
}
