//go:build amd64 && !purego

package gemm

import "golang.org/x/sys/cpu"

//go:noescape
func row16(k int, a, b *float32, ldb int, c *float32, overwrite bool)

//go:noescape
func row64(k int, a, b *float32, ldb int, c *float32, overwrite bool)

//go:noescape
func row16m(k int, a, b *float32, ldb int, c *float32, overwrite bool, mask *int32)

// rowMasks holds 16 lanes of -1 then 16 of 0: &rowMasks[16-w] masks the
// first w of 16 columns.
var rowMasks = [32]int32{-1, -1, -1, -1, -1, -1, -1, -1, -1, -1, -1, -1, -1, -1, -1, -1}

// rowAsm is rowKernel in AVX2/FMA assembly: 64 columns at a time while
// they last, then 16, then the rest under a mask.
func rowAsm(k, w int, a, b []float32, ldb int, c []float32, overwrite bool) {
	_ = a[k-1]
	_ = b[(k-1)*ldb+w-1]
	_ = c[w-1]
	j := 0
	for ; j+64 <= w; j += 64 {
		row64(k, &a[0], &b[j], ldb, &c[j], overwrite)
	}
	for ; j+16 <= w; j += 16 {
		row16(k, &a[0], &b[j], ldb, &c[j], overwrite)
	}
	if j < w {
		row16m(k, &a[0], &b[j], ldb, &c[j], overwrite, &rowMasks[16-(w-j)])
	}
}

func init() {
	if cpu.X86.HasAVX2 && cpu.X86.HasFMA {
		rowKernel = rowAsm
	}
}
