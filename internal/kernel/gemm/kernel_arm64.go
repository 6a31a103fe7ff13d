//go:build arm64 && !purego

package gemm

//go:noescape
func kern6x16(k int, a, b, c *float32, ldc int, overwrite bool)

// kernelNEON is kernel in NEON assembly (every arm64 CPU has it).
func kernelNEON(k int, a, b, c []float32, ldc int, overwrite bool) {
	if k == 0 {
		if overwrite {
			for i := 0; i < mr; i++ {
				clear(c[i*ldc : i*ldc+nr])
			}
		}
		return
	}
	_ = a[k*mr-1]
	_ = b[k*nr-1]
	_ = c[(mr-1)*ldc+nr-1]
	kern6x16(k, &a[0], &b[0], &c[0], ldc, overwrite)
}

func init() {
	kernel = kernelNEON
	useAsm = true
}
