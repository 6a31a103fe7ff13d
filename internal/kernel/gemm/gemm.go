package gemm

import (
	"sync"

	"github.com/quernlab/quern/internal/kernel/par"

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

// kernelPair, when not nil, computes the 6 x 32 tile of two adjacent
// full B panels in one pass (AVX-512), with the same arithmetic per
// element as kernel.
var kernelPair func(k int, a, b0, b1, c []float32, ldc int, overwrite bool)

// copyPanel copies n rows of nr values, lds apart in src, into dst (an
// untransposed B panel into its packed form); assembly where available.
var copyPanel = func(dst, src []float32, n, lds int) {
	for p := 0; p < n; p++ {
		copy(dst[p*nr:p*nr+nr], src[p*lds:p*lds+nr])
	}
}

// copyPanel6 copies n rows of mr values, lds apart in src, into dst (a
// transposed A panel into its packed form); assembly where available.
var copyPanel6 = func(dst, src []float32, n, lds int) {
	for p := 0; p < n; p++ {
		copy(dst[p*mr:p*mr+mr], src[p*lds:p*lds+mr])
	}
}

// packTrans, when not nil, packs the first multiple of 8 depth steps of a
// full transposed B panel and returns how many it packed (assembly).
var packTrans func(pan, b []float32, ldb, pc, kb, j0 int) int

// packRows, when not nil, packs the first multiple of 8 depth steps of a
// full untransposed A panel and returns how many it packed (assembly).
var packRows func(pan, a []float32, lda, pc, kb, r0 int) int

// kernelAVX2 is the AVX2 kernel where there is one, kept for the test
// that checks the AVX-512 kernels against it.
var kernelAVX2 func(k int, a, b, c []float32, ldc int, overwrite bool)

// UsingAVX512 reports whether the AVX-512 kernel for pairs of panels is
// in use.
func UsingAVX512() bool { return kernelPair != nil }

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

type buffers struct{ a, b, tile, flat []float32 }

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
	SgemmThen(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc, nil)
}

// Finisher is work on finished blocks of C, such as adding a bias and
// applying an activation while the block is still in the cache of the
// processor that computed it.
type Finisher interface {
	// Finish is called once for each of a set of blocks that together
	// cover C exactly once: rows [i0, i1) and columns [j0, j1), each block
	// complete when called. Calls for different blocks may run at once, on
	// different goroutines.
	Finish(i0, i1, j0, j1 int)
}

// SgemmThen is Sgemm followed by then.Finish over the blocks of C (then
// may be nil). In products of up to 512 rows (a batch) each pair of column
// panels is finished by the goroutine that computed it, as soon as it is
// done, while it is in that processor's cache; larger products are
// finished by blocks of rows once the whole product is done.
func SgemmThen(tA, tB blas.Transpose, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int, then Finisher) {
	if m == 0 || n == 0 {
		return
	}
	if tA == blas.NoTrans && tB == blas.NoTrans && alpha == 1 && k > 0 && direct(m, n, k) {
		scaleC(m, n, k, alpha, beta, c, ldc)
		rowsDirect(m, n, k, a, lda, b, ldb, beta, c, ldc)
		if then != nil {
			then.Finish(0, m, 0, n)
		}
		return
	}
	workers := par.Workers()
	if m*n*k < parMinWork {
		workers = 1
	}
	if m <= flatMaxM {
		sgemmFlat(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc, workers, then)
		return
	}
	sgemm(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, c, ldc, workers)
	if then != nil {
		finishRows(m, n, then)
	}
}

// rowKernel computes c[0:w] += sum over p < k of a[p] * b[p*ldb+j] (or =
// when overwrite is set), w >= 1, with the arithmetic of kernel for each
// element: one accumulator from +0, one multiply-add per depth step in
// order, then one addition into c. Assembly where the CPU allows.
var rowKernel = rowGo

func rowGo(k, w int, a, b []float32, ldb int, c []float32, overwrite bool) {
	for j0 := 0; j0 < w; j0 += nr {
		nw := min(nr, w-j0)
		// the loop of kernelGo, for one row
		var acc [nr]float32
		for p := 0; p < k; p++ {
			ap := a[p]
			bp := b[p*ldb+j0 : p*ldb+j0+nw]
			for j := range bp {
				acc[j] += ap * bp[j]
			}
		}
		ci := c[j0 : j0+nw]
		if overwrite {
			copy(ci, acc[:nw])
			continue
		}
		for j := range ci {
			ci[j] += acc[j]
		}
	}
}

// rowsDirect is Sgemm for a few rows (see direct), untransposed operands and
// alpha 1, C already scaled: each row runs past the unpacked rows of B
// (packing B and a row panel of mr rows costs more than it saves for a
// few rows, as in scoring one request). Every element gets the
// arithmetic it gets in the packed path, so the results are bitwise the
// same.
func rowsDirect(m, n, k int, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int) {
	for pc := 0; pc < k; pc += kc {
		kb := min(kc, k-pc)
		over := pc == 0 && beta == 0
		for i := 0; i < m; i++ {
			rowKernel(kb, n, a[i*lda+pc:], b[pc*ldb:], ldb, c[i*ldc:], over)
		}
	}
}

// direct reports whether rowsDirect is the faster way to an m x n by n x k
// product: for one to three rows, and for up to five when B is small enough
// to stay in the first-level cache (measured on the reference shapes: at
// four rows of a 784 x 400 B, direct and packed were level, at five the
// packed path was 15% faster).
func direct(m, n, k int) bool { return m <= 3 || m < mr && n*k <= 1<<14 }

// parMinWork is the smallest m*n*k shared between goroutines: below it
// the hand-over costs more than the second processor gains.
const parMinWork = 1 << 18

// finishRows calls then.Finish over blocks of mc rows, sharing them
// between goroutines where that is worth it.
func finishRows(m, n int, then Finisher) {
	blocks := (m + mc - 1) / mc
	if !par.Worth(m * n) {
		then.Finish(0, m, 0, n)
		return
	}
	par.Items(blocks, func(blk int) { then.Finish(blk*mc, min((blk+1)*mc, m), 0, n) })
}

// flatMaxM is the most rows of C for which sgemmFlat packs the whole of A
// once (up to flatMaxM x k values) and shares out column panels: a batch
// of 64 to 512 rows makes too few row blocks to share between threads, and
// every thread would otherwise pack A again.
const flatMaxM = 512

// sgemmFlat is Sgemm for m <= flatMaxM: A is packed whole, then the
// column panels of C are split among the goroutines, each packing one B
// panel at a time and running it past every panel of A. Every tile gets
// the same packed values, depth blocks and kernel calls as in sgemm, so
// the results are bitwise the same whatever the number of goroutines.
// then, when not nil, finishes each pair of column panels as soon as it
// is done.
func sgemmFlat(tA, tB blas.Transpose, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int, workers int, then Finisher) {
	scaleC(m, n, k, alpha, beta, c, ldc)
	if k == 0 || alpha == 0 {
		if then != nil {
			then.Finish(0, m, 0, n)
		}
		return
	}
	mp := (m + mr - 1) / mr
	fb := bufs.Get().(*buffers)
	fb.flat = grow(fb.flat, mp*mr*k)
	panels := (n + nr - 1) / nr
	if workers <= 1 {
		flatPackA(fb.flat, 0, mp, tA, m, k, alpha, a, lda)
		flatColumns(fb.flat, 0, panels, m, n, k, tB, b, ldb, beta, c, ldc)
		if then != nil {
			then.Finish(0, m, 0, n)
		}
	} else {
		// pack A in groups of row panels, then share out pairs of column
		// panels; the caller takes groups and pairs too (par.Items)
		groups := min(mp, 4*workers)
		par.Items(groups, func(g int) {
			flatPackA(fb.flat, g*mp/groups, (g+1)*mp/groups, tA, m, k, alpha, a, lda)
		})
		par.Items((panels+1)/2, func(u int) {
			flatColumns(fb.flat, 2*u, min(2*u+2, panels), m, n, k, tB, b, ldb, beta, c, ldc)
			if then != nil {
				then.Finish(0, m, 2*u*nr, min((2*u+2)*nr, n))
			}
		})
	}
	bufs.Put(fb)
}

// flatPackA packs row panels [q0, q1) of op(A), for every depth block,
// into the layout of sgemmFlat: depth block pc starts at pc*mp*mr.
func flatPackA(dst []float32, q0, q1 int, tA blas.Transpose, m, k int, alpha float32, a []float32, lda int) {
	mp := (m + mr - 1) / mr
	if q0 >= q1 {
		return
	}
	r0, r1 := q0*mr, min(q1*mr, m)
	for pc := 0; pc < k; pc += kc {
		kb := min(kc, k-pc)
		packA(dst[pc*mp*mr+q0*kb*mr:], tA, a, lda, alpha, r0, r1-r0, pc, kb)
	}
}

// flatColumns computes column panels [p0, p1) of C from the packed A.
func flatColumns(ap []float32, p0, p1, m, n, k int, tB blas.Transpose, b []float32, ldb int, beta float32, c []float32, ldc int) {
	bf := bufs.Get().(*buffers)
	bf.b = grow(bf.b, 2*kc*nr)
	bf.tile = grow(bf.tile, mr*nr)
	mp := (m + mr - 1) / mr
	// depth blocks outermost: the packed A of one block (at most
	// flatMaxM x kc values) stays in cache across this goroutine's panels
	for pc := 0; pc < k; pc += kc {
		kb := min(kc, k-pc)
		over := pc == 0 && beta == 0
		apc := ap[pc*mp*mr:]
		for jp := p0; jp < p1; jp++ {
			j0 := jp * nr
			nw := min(nr, n-j0)
			if kernelPair != nil && jp+1 < p1 && j0+2*nr <= n {
				// two full panels side by side
				packB(bf.b, tB, b, ldb, pc, kb, j0, 2*nr)
				b0, b1 := bf.b[:kb*nr], bf.b[kb*nr:2*kb*nr]
				for ip := 0; ip < mp; ip++ {
					i0 := ip * mr
					apan := apc[ip*kb*mr : (ip+1)*kb*mr]
					if mh := min(mr, m-i0); mh < mr {
						tile(kb, apan, b0, bf.tile, c, ldc, i0, j0, mh, nr, over)
						tile(kb, apan, b1, bf.tile, c, ldc, i0, j0+nr, mh, nr, over)
						continue
					}
					kernelPair(kb, apan, b0, b1, c[i0*ldc+j0:], ldc, over)
				}
				jp++
				continue
			}
			packB(bf.b, tB, b, ldb, pc, kb, j0, nw)
			bpan := bf.b[:kb*nr]
			for ip := 0; ip < mp; ip++ {
				i0 := ip * mr
				apan := apc[ip*kb*mr : (ip+1)*kb*mr]
				tile(kb, apan, bpan, bf.tile, c, ldc, i0, j0, min(mr, m-i0), nw, over)
			}
		}
	}
	bufs.Put(bf)
}

// tile runs the kernel for the mh x nw tile of C at (i0, j0): in place
// when it is whole, else through the scratch tile.
func tile(kb int, apan, bpan, scratch, c []float32, ldc, i0, j0, mh, nw int, over bool) {
	if mh == mr && nw == nr {
		kernel(kb, apan, bpan, c[i0*ldc+j0:], ldc, over)
		return
	}
	kernel(kb, apan, bpan, scratch, nr, true)
	for i := 0; i < mh; i++ {
		ci := c[(i0+i)*ldc+j0 : (i0+i)*ldc+j0+nw]
		ti := scratch[i*nr : i*nr+nw]
		if over {
			copy(ci, ti)
			continue
		}
		for j := range ci {
			ci[j] += ti[j]
		}
	}
}

// scaleC sets C = beta*C before the kernels add alpha*A*B; with beta 0
// the first depth block overwrites C instead (no clearing pass), unless
// there is nothing to add.
func scaleC(m, n, k int, alpha, beta float32, c []float32, ldc int) {
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
}

// sgemm is Sgemm on at most workers goroutines, sharing row blocks.
func sgemm(tA, tB blas.Transpose, m, n, k int, alpha float32, a []float32, lda int, b []float32, ldb int, beta float32, c []float32, ldc int, workers int) {
	scaleC(m, n, k, alpha, beta, c, ldc)
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
				blocksParallel(blocks, m, tA, a, lda, alpha, pc, kb, bb.b, nb, c, ldc, jc, over)
			}
			bufs.Put(bb)
		}
	}
}

// blocksParallel shares the row blocks of one packed B block among the
// calling goroutine and helpers (par.Items). It is a function of its own
// so that the serial path allocates nothing.
func blocksParallel(blocks, m int, tA blas.Transpose, a []float32, lda int, alpha float32, pc, kb int, pb []float32, nb int, c []float32, ldc, jc int, over bool) {
	par.Items(blocks, func(blk int) {
		ab := bufs.Get().(*buffers)
		ic := blk * mc
		block(ab, tA, a, lda, alpha, ic, min(mc, m-ic), pc, kb, pb, nb, c, ldc, jc, over)
		bufs.Put(ab)
	})
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
		if kernelPair != nil && j0+2*nr <= nb {
			b1 := pb[(jp+1)*kb*nr : (jp+2)*kb*nr]
			for ip := 0; ip < mpanels; ip++ {
				i0 := ip * mr
				apan := bf.a[ip*kb*mr : (ip+1)*kb*mr]
				if mh := min(mr, mb-i0); mh < mr {
					tile(kb, apan, bpan, bf.tile, c, ldc, ic+i0, jc+j0, mh, nr, over)
					tile(kb, apan, b1, bf.tile, c, ldc, ic+i0, jc+j0+nr, mh, nr, over)
					continue
				}
				kernelPair(kb, apan, bpan, b1, c[(ic+i0)*ldc+jc+j0:], ldc, over)
			}
			jp++
			continue
		}
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
		rows := min(mr, mb-ip*mr)
		if tA == blas.NoTrans && rows == mr {
			done := 0
			if alpha == 1 && packRows != nil {
				done = packRows(pan, a, lda, pc, kb, ic+ip*mr)
			}
			if done == kb {
				continue
			}
			// six rows read side by side, the panel written in order
			pan := pan[done*mr:]
			kb, pc := kb-done, pc+done
			base := (ic+ip*mr)*lda + pc
			r0 := a[base : base+kb]
			r1 := a[base+lda : base+lda+kb]
			r2 := a[base+2*lda : base+2*lda+kb]
			r3 := a[base+3*lda : base+3*lda+kb]
			r4 := a[base+4*lda : base+4*lda+kb]
			r5 := a[base+5*lda : base+5*lda+kb]
			for p, v := range r0 {
				d := pan[p*mr : p*mr+mr : p*mr+mr]
				d[0] = alpha * v
				d[1] = alpha * r1[p]
				d[2] = alpha * r2[p]
				d[3] = alpha * r3[p]
				d[4] = alpha * r4[p]
				d[5] = alpha * r5[p]
			}
			continue
		}
		if tA == blas.Trans && rows == mr {
			// op(A) = A^T: the panel's mr values at depth p are
			// consecutive in row pc+p of A
			r0 := ic + ip*mr
			if alpha == 1 {
				copyPanel6(pan, a[pc*lda+r0:], kb, lda)
				continue
			}
			for p := 0; p < kb; p++ {
				src := a[(pc+p)*lda+r0 : (pc+p)*lda+r0+mr]
				d := pan[p*mr : p*mr+mr]
				for i, v := range src {
					d[i] = alpha * v
				}
			}
			continue
		}
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
		if tB == blas.NoTrans {
			if w == nr {
				copyPanel(pan, b[pc*ldb+j0:], kb, ldb)
				continue
			}
			for p := 0; p < kb; p++ {
				row := pan[p*nr : p*nr+nr]
				copy(row[:w], b[(pc+p)*ldb+j0:(pc+p)*ldb+j0+w])
				clear(row[w:])
			}
			continue
		}
		// op(B) = B^T: column j of the panel is row j0+j of B, read
		// in order
		done := 0
		if w == nr && packTrans != nil {
			done = packTrans(pan, b, ldb, pc, kb, j0)
		}
		if done == kb {
			continue
		}
		if w < nr {
			clear(pan)
		}
		for j := 0; j < w; j++ {
			src := b[(j0+j)*ldb+pc+done : (j0+j)*ldb+pc+kb]
			for p, v := range src {
				pan[(done+p)*nr+j] = v
			}
		}
	}
}
