//go:build amd64 && !purego

package gemm

import "golang.org/x/sys/cpu"

//go:noescape
func kern6x16(k int, a, b, c *float32, ldc int, overwrite bool)

func kernelAsm(k int, a, b, c []float32, ldc int, overwrite bool) {
	if k == 0 {
		return
	}
	// bounds the assembly relies on
	_ = a[k*mr-1]
	_ = b[k*nr-1]
	_ = c[(mr-1)*ldc+nr-1]
	kern6x16(k, &a[0], &b[0], &c[0], ldc, overwrite)
}

func init() {
	if cpu.X86.HasAVX2 && cpu.X86.HasFMA {
		kernel = kernelAsm
		useAsm = true
	}
}
