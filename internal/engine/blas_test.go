package engine_test

import (
	"testing"

	"github.com/quernlab/quern/internal/engine"
	"github.com/stretchr/testify/require"
)

func TestBLASName(t *testing.T) {
	require.Contains(t, []string{"quern-gemm", "openblas"}, engine.BLASName())
	t.Logf("graphs use %s", engine.BLASName())
}
