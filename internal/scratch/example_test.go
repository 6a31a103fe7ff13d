package scratch_test

import (
	"fmt"

	"github.com/quernlab/quern/internal/scratch"
)

type work struct{ buf []float32 }

func ExamplePool() {
	var p scratch.Pool[work]
	w := p.Get() // one goroutine's workspace
	w.buf = scratch.Grow(w.buf, 4)
	fmt.Println(len(w.buf))
	p.Put(w)
	// Output: 4
}
