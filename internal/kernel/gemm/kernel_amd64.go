//go:build amd64 && !purego

package gemm

import "golang.org/x/sys/cpu"

//go:noescape
func kern6x16(k int, a, b, c *float32, ldc int, overwrite bool)

//go:noescape
func copyRows16(dst, src *float32, n, lds int)

// copyPanelAsm copies n rows of 16 values, lds apart in src, into dst.
func copyPanelAsm(dst, src []float32, n, lds int) {
	if n == 0 {
		return
	}
	_ = dst[n*nr-1]
	_ = src[(n-1)*lds+nr-1]
	copyRows16(&dst[0], &src[0], n, lds)
}

//go:noescape
func copyRows6(dst, src *float32, n, lds int)

// copyPanel6Asm copies n rows of 6 values, lds apart in src, into dst.
func copyPanel6Asm(dst, src []float32, n, lds int) {
	if n == 0 {
		return
	}
	_ = dst[n*mr-1]
	_ = src[(n-1)*lds+mr-1]
	copyRows6(&dst[0], &src[0], n, lds)
}

//go:noescape
func transpose16(dst, src *float32, lds, groups int)

// packTransAsm packs the first multiple of 8 depth steps of a full
// transposed B panel (rows j0..j0+15 of B from column pc) and returns how
// many it packed.
func packTransAsm(pan, b []float32, ldb, pc, kb, j0 int) int {
	g := kb / 8
	if g == 0 {
		return 0
	}
	_ = pan[g*8*nr-1]
	_ = b[(j0+nr-1)*ldb+pc+g*8-1]
	transpose16(&pan[0], &b[j0*ldb+pc], ldb, g)
	return g * 8
}

//go:noescape
func interleave6(dst, src *float32, lda, groups int)

// packRowsAsm packs the first multiple of 8 depth steps of a full
// untransposed A panel (rows r0..r0+5 of A from column pc) and returns
// how many it packed.
func packRowsAsm(pan, a []float32, lda, pc, kb, r0 int) int {
	g := kb / 8
	if g == 0 {
		return 0
	}
	_ = pan[g*8*mr-1]
	_ = a[(r0+mr-1)*lda+pc+g*8-1]
	interleave6(&pan[0], &a[r0*lda+pc], lda, g)
	return g * 8
}

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
		kernelAVX2 = kernelAsm
		copyPanel = copyPanelAsm
		copyPanel6 = copyPanel6Asm
		packTrans = packTransAsm
		packRows = packRowsAsm
		useAsm = true
	}
}

//go:noescape
func kern6x32(k int, a, b0, b1, c *float32, ldc int, overwrite bool)

// kernelPairAsm is kernel for two adjacent B panels at once (a 6 x 32
// tile) on CPUs with AVX-512.
func kernelPairAsm(k int, a, b0, b1, c []float32, ldc int, overwrite bool) {
	if k == 0 {
		return
	}
	_ = a[k*mr-1]
	_ = b0[k*nr-1]
	_ = b1[k*nr-1]
	_ = c[(mr-1)*ldc+2*nr-1]
	kern6x32(k, &a[0], &b0[0], &b1[0], &c[0], ldc, overwrite)
}

//go:noescape
func kern6x16z(k int, a, b, c *float32, ldc int, overwrite bool)

// kernelAsm512 is kernelAsm in AVX-512 registers.
func kernelAsm512(k int, a, b, c []float32, ldc int, overwrite bool) {
	if k == 0 {
		return
	}
	_ = a[k*mr-1]
	_ = b[k*nr-1]
	_ = c[(mr-1)*ldc+nr-1]
	kern6x16z(k, &a[0], &b[0], &c[0], ldc, overwrite)
}

func init() {
	if useAsm && cpu.X86.HasAVX512F {
		kernelPair = kernelPairAsm
		kernel = kernelAsm512
	}
}
