// Package gemm is quern's float32 matrix product: packed panels, a 6x16
// register-blocked micro-kernel in AVX2/FMA assembly on amd64 CPUs that
// have it (detected at run time) and a portable Go kernel elsewhere, and
// a split of the work across GOMAXPROCS goroutines for large products.
// It is plugged into gorgonia's BLAS hook by package engine; every other
// routine still comes from gonum.
package gemm

import (
	"runtime"
	"sync"

	"gonum.org/v1/gonum/blas"
)

const (
	mr = 6   // rows of a micro-tile
	nr = 16  // columns of a micro-tile
	kc = 256 // depth of a packed block
	mc = 72  // rows of a packed block of A (a multiple of mr)
	nc = 1024
)

// kernel computes C[0:mr, 0:nr] += A_panel * B_panel for k steps (or
// C = A_panel * B_panel when overwrite is set), where the A panel holds k
// groups of mr values and the B panel k groups of nr values; c starts at
// the tile's first element and ldc is C's row stride. It is the assembly
// kernel when the CPU allows, else kernelGo.
var kernel = kernelGo

// UsingAssembly reports whether the AVX2/FMA kernel is in use.
func UsingAssembly() bool { return useAsm }

var useAsm bool

func kernelGo(k int, a, b, c []float32, ldc int, overwrite bool) {
	var acc [mr][nr]float32
	for p := 0; p < k; p++ {
		bp := b[p*nr : p*nr+nr]
		ap := a[p*mr : p*mr+mr]
		for i := 0; i < mr; i++ {
			ai := ap[i]
			row := &acc[i]
			for j := range row {
				row[j] += ai * bp[j]
			}
		}
	}
	for i := 0; i < mr; i++ {
		ci := c[i*ldc : i*ldc+nr]
		if overwrite {
			copy(ci, acc[i][:])
			continue
		}
		for j := range ci {
			ci[j] += acc[i][j]
		}
	}
}

var bufs = sync.Pool{New: func() any { return new(buffers) }}

type buffers struct{ a, b, tile []float32 }

func grow(s []float32, n int) []float32 {
	if cap(s) < n {
		return make([]float32, n)
	}
	return s[:n]
}

// Sgemm computes C = alpha*op(A)*op(B) + beta*C for row-major matrices,
// with the meaning of every argument as in gonum's blas32 Sgemm; m, n and k
// are the sizes of op(A) (m x k), op(B) (k x n) and C (m x n).
func Sgemm(tA, tB blas.Transpose, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	if m == 0 || n == 0 {
		return
	}
	workers := runtime.GOMAXPROCS(0)
	if m*n*k < 1<<18 {
		workers = 1
	}
	panels := (n + nr - 1) / nr
	if workers > 1 && (m+mc-1)/mc < 2*workers && panels >= 2 {
		// Too few row blocks to share (a batch of 64 or 128 rows): give
		// each goroutine its own range of column panels instead, packing
		// its own part of B. Split at panel boundaries, every element of
		// C goes through the same tiles and depth order as in one thread,
		// so the result is bitwise the same.
		w := min(workers, panels)
		var wg sync.WaitGroup
		for t := 1; t < w; t++ {
			wg.Add(1)
			go columnRange(&wg, t, w, panels, tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
		}
		columnRange(nil, 0, w, panels, tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc)
		wg.Wait()
		return
	}
	sgemm(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc, workers)
}

// columnRange computes share t of w of C's column panels in one thread.
func columnRange(wg *sync.WaitGroup, t, w, panels int, tA, tB blas.Transpose, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	if wg != nil {
		defer wg.Done()
	}
	j0, j1 := t*panels/w*nr, min((t+1)*panels/w*nr, n)
	if j0 >= j1 {
		return
	}
	bs := b[j0:]
	if tB == blas.Trans {
		bs = b[j0*ldb:]
	}
	sgemm(tA, tB, m, j1-j0, k, alpha, a, lda, bs, ldb, beta, c[j0:], ldc, 1)
}

// sgemm is Sgemm on at most workers goroutines, sharing row blocks.
func sgemm(tA, tB blas.Transpose, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int, workers int) {
	// C = beta*C first, the kernels then add alpha*A*B; with beta 0 the
	// first depth block overwrites C instead (no clearing pass), unless
	// there is nothing to add.
	if beta != 1 && (beta != 0 || k == 0 || alpha == 0) {
		for i := 0; i < m; i++ {
			row := c[i*ldc : i*ldc+n]
			if beta == 0 {
				clear(row)
				continue
			}
			for j := range row {
				row[j] *= beta
			}
		}
	}
	if k == 0 || alpha == 0 {
		return
	}
	for jc := 0; jc < n; jc += nc {
		nb := min(nc, n-jc)
		for pc := 0; pc < k; pc += kc {
			kb := min(kc, k-pc)
			bb := bufs.Get().(*buffers)
			npanels := (nb + nr - 1) / nr
			bb.b = grow(bb.b, npanels*kb*nr)
			packB(bb.b, tB, b, ldb, pc, kb, jc, nb)
			over := pc == 0 && beta == 0
			blocks := (m + mc - 1) / mc
			w := min(workers, blocks)
			if w <= 1 {
				for ic := 0; ic < m; ic += mc {
					block(bb, tA, a, lda, alpha, ic, min(mc, m-ic), pc, kb, bb.b, nb, c, ldc, jc, over)
				}
			} else {
				blocksParallel(w, blocks, m, tA, a, lda, alpha, pc, kb, bb.b, nb, c, ldc, jc, over)
			}
			bufs.Put(bb)
		}
	}
}

// blocksParallel shares the row blocks of one packed B block among w
// goroutines. It is a function of its own so that the serial path
// allocates nothing (variables captured by the goroutines escape).
func blocksParallel(w, blocks, m int, tA blas.Transpose, a []float32, lda int, alpha float32, pc, kb int, pb []float32, nb int, c []float32, ldc, jc int, over bool) {
	var wg sync.WaitGroup
	for t := 0; t < w; t++ {
		wg.Add(1)
		go func(t int) {
			defer wg.Done()
			ab := bufs.Get().(*buffers)
			for blk := t; blk < blocks; blk += w {
				ic := blk * mc
				block(ab, tA, a, lda, alpha, ic, min(mc, m-ic), pc, kb, pb, nb, c, ldc, jc, over)
			}
			bufs.Put(ab)
		}(t)
	}
	wg.Wait()
}

// block multiplies rows [ic, ic+mb) of op(A) (depth [pc, pc+kb)) by the
// packed B block into C, overwriting C's values when over is set.
func block(bf *buffers, tA blas.Transpose, a []float32, lda int, alpha float32, ic, mb, pc, kb int, pb []float32, nb int, c []float32, ldc, jc int, over bool) {
	mpanels := (mb + mr - 1) / mr
	bf.a = grow(bf.a, mpanels*kb*mr)
	packA(bf.a, tA, a, lda, alpha, ic, mb, pc, kb)
	bf.tile = grow(bf.tile, mr*nr)
	for jp := 0; jp*nr < nb; jp++ {
		j0 := jp * nr
		nw := min(nr, nb-j0)
		bpan := pb[jp*kb*nr : (jp+1)*kb*nr]
		for ip := 0; ip < mpanels; ip++ {
			i0 := ip * mr
			mh := min(mr, mb-i0)
			apan := bf.a[ip*kb*mr : (ip+1)*kb*mr]
			if mh == mr && nw == nr {
				off := (ic+i0)*ldc + jc + j0
				kernel(kb, apan, bpan, c[off:], ldc, over)
				continue
			}
			// edge tile: compute into a scratch tile, then store or add
			// its valid part
			kernel(kb, apan, bpan, bf.tile, nr, true)
			for i := 0; i < mh; i++ {
				ci := c[(ic+i0+i)*ldc+jc+j0 : (ic+i0+i)*ldc+jc+j0+nw]
				ti := bf.tile[i*nr : i*nr+nw]
				if over {
					copy(ci, ti)
					continue
				}
				for j := range ci {
					ci[j] += ti[j]
				}
			}
		}
	}
}

// packA copies alpha*op(A)[ic:ic+mb, pc:pc+kb] into panels of mr rows:
// panel p holds, for each depth step, mr consecutive values (zero padded).
func packA(dst []float32, tA blas.Transpose, a []float32, lda int, alpha float32, ic, mb, pc, kb int) {
	for ip := 0; ip*mr < mb; ip++ {
		pan := dst[ip*kb*mr : (ip+1)*kb*mr]
		for i := 0; i < mr; i++ {
			r := ip*mr + i
			if r >= mb {
				for p := 0; p < kb; p++ {
					pan[p*mr+i] = 0
				}
				continue
			}
			if tA == blas.NoTrans {
				src := a[(ic+r)*lda+pc : (ic+r)*lda+pc+kb]
				for p, v := range src {
					pan[p*mr+i] = alpha * v
				}
			} else {
				for p := 0; p < kb; p++ {
					pan[p*mr+i] = alpha * a[(pc+p)*lda+ic+r]
				}
			}
		}
	}
}

// packB copies op(B)[pc:pc+kb, jc:jc+nb] into panels of nr columns.
func packB(dst []float32, tB blas.Transpose, b []float32, ldb, pc, kb, jc, nb int) {
	for jp := 0; jp*nr < nb; jp++ {
		pan := dst[jp*kb*nr : (jp+1)*kb*nr]
		j0 := jc + jp*nr
		w := min(nr, nb-jp*nr)
		for p := 0; p < kb; p++ {
			row := pan[p*nr : p*nr+nr]
			if tB == blas.NoTrans {
				copy(row[:w], b[(pc+p)*ldb+j0:(pc+p)*ldb+j0+w])
			} else {
				for j := 0; j < w; j++ {
					row[j] = b[(j0+j)*ldb+pc+p]
				}
			}
			clear(row[w:])
		}
	}
}
