//go:build arm64 && !purego

package gemm

import (
	"math/rand/v2"
	"testing"

	"github.com/stretchr/testify/require"
)

// On arm64 the Go compiler fuses the Go kernel's multiply-add, so the NEON
// kernel, which accumulates from zero in the same order and then adds to
// C, gives bitwise the same tile (run under qemu-aarch64 on amd64 hosts:
// GOARCH=arm64 go test -c, then qemu-aarch64-static on the binary).
func TestNEONKernelMatchesGoKernel(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	for _, k := range []int{1, 2, 7, 256} {
		a, b := randSlice(rng, k*mr), randSlice(rng, k*nr)
		for _, over := range []bool{false, true} {
			const ldc = 21
			c0 := randSlice(rng, (mr-1)*ldc+nr)
			want := append([]float32(nil), c0...)
			got := append([]float32(nil), c0...)
			kernelGo(k, a, b, want, ldc, over)
			kernelNEON(k, a, b, got, ldc, over)
			require.Equal(t, want, got, "k=%d overwrite=%v", k, over)
		}
	}
}
