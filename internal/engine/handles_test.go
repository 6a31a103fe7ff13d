package engine_test

import (
	"sync"

	"github.com/quernlab/quern/internal/engine"
	"github.com/quernlab/quern/layers"
)

// The tests name their inputs; handle and dropouts keep one handle per name
// and one list of dropout-mask handles per network.
var (
	handles    sync.Map // name -> *engine.Input
	maskInputs sync.Map // *layers.MLP -> []*engine.Input
)

func handle(name string) *engine.Input {
	h, _ := handles.LoadOrStore(name, engine.NewInput(name))
	return h.(*engine.Input)
}

func dropouts(m *layers.MLP) []*engine.Input {
	h, _ := maskInputs.LoadOrStore(m, engine.DropoutInputs(m))
	return h.([]*engine.Input)
}
