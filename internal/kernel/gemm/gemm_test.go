package gemm

import (
	"math"
	"math/rand/v2"
	"runtime"
	"sync"
	"testing"

	"github.com/stretchr/testify/require"
	"gonum.org/v1/gonum/blas"
	gonumblas "gonum.org/v1/gonum/blas/gonum"
)

func randSlice(rng *rand.Rand, n int) []float32 {
	s := make([]float32, n)
	for i := range s {
		s[i] = float32(rng.NormFloat64())
	}
	return s
}

// check compares Sgemm with gonum's reference Sgemm (blas/gonum) on one
// problem. Tolerance: float32 sums of k products in different orders,
// 1e-5 relative to the sum of absolute products plus 1e-6.
func check(t *testing.T, rng *rand.Rand, tA, tB blas.Transpose, m, n, k int, alpha, beta float32) {
	t.Helper()
	ar, ac := m, k
	if tA == blas.Trans {
		ar, ac = k, m
	}
	br, bc := k, n
	if tB == blas.Trans {
		br, bc = n, k
	}
	lda, ldb, ldc := max(ac, 1)+rng.IntN(3), max(bc, 1)+rng.IntN(3), max(n, 1)+rng.IntN(3)
	a, b := randSlice(rng, max(ar*lda, 1)), randSlice(rng, max(br*ldb, 1))
	c := randSlice(rng, max(m*ldc, 1))
	want := append([]float32(nil), c...)
	gonumblas.Implementation{}.Sgemm(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, want, ldc)
	got := append([]float32(nil), c...)
	Sgemm(tA, tB, m, n, k, alpha, a, lda, b, ldb, beta, got, ldc)
	for i := range want {
		scale := math.Abs(float64(want[i])) + float64(k)
		if math.Abs(float64(want[i]-got[i])) > 1e-5*scale+1e-6 {
			t.Fatalf("tA=%c tB=%c m=%d n=%d k=%d alpha=%v beta=%v: element %d is %v, want %v", tA, tB, m, n, k, alpha, beta, i, got[i], want[i])
		}
	}
}

func TestAgainstGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	shapes := [][3]int{{1, 1, 1}, {6, 16, 1}, {7, 17, 3}, {5, 15, 300}, {13, 33, 257}, {128, 784, 400}, {73, 1030, 20}, {64, 1, 512}, {1, 784, 20}, {0, 5, 3}, {4, 4, 0}}
	for _, kern := range []struct {
		name string
		f    func(int, []float32, []float32, []float32, int, bool)
	}{{"go", kernelGo}, {"selected", kernel}} {
		saved := kernel
		kernel = kern.f
		for _, s := range shapes {
			for _, tA := range []blas.Transpose{blas.NoTrans, blas.Trans} {
				for _, tB := range []blas.Transpose{blas.NoTrans, blas.Trans} {
					check(t, rng, tA, tB, s[0], s[1], s[2], 1, 0)
					check(t, rng, tA, tB, s[0], s[1], s[2], -0.5, 1)
					check(t, rng, tA, tB, s[0], s[1], s[2], 2, 0.25)
				}
			}
		}
		for i := 0; i < 50; i++ {
			check(t, rng, blas.Transpose([]byte{'N', 'T'}[rng.IntN(2)]), blas.Transpose([]byte{'N', 'T'}[rng.IntN(2)]), 1+rng.IntN(90), 1+rng.IntN(90), 1+rng.IntN(600), 1, 0)
		}
		kernel = saved
	}
	t.Logf("assembly kernel in use: %v, AVX-512 pairs: %v", UsingAssembly(), UsingAVX512())
}

// Large products run on several goroutines; the result must not depend on
// their number (each C element is summed by one goroutine in one order).
func TestWorkersGiveIdenticalResults(t *testing.T) {
	rng := rand.New(rand.NewPCG(2, 2))
	// 300 rows share row blocks; 64 and 128 rows (a batch) share column
	// panels, n = 200 and 785 leave a partial panel
	for _, s := range [][3]int{{300, 200, 150}, {64, 785, 512}, {128, 400, 784}, {128, 200, 300}} {
		m, n, k := s[0], s[1], s[2]
		for _, tA := range []blas.Transpose{blas.NoTrans, blas.Trans} {
			for _, tB := range []blas.Transpose{blas.NoTrans, blas.Trans} {
				a, b := randSlice(rng, m*k), randSlice(rng, k*n)
				c0 := randSlice(rng, m*n)
				lda, ldb := k, n
				if tA == blas.Trans {
					lda = m
				}
				if tB == blas.Trans {
					ldb = k
				}
				var first []float32
				for _, procs := range []int{1, 2, 3, 4} {
					c := append([]float32(nil), c0...)
					old := runtime.GOMAXPROCS(procs)
					Sgemm(tA, tB, m, n, k, 1, a, lda, b, ldb, 0.5, c, n)
					runtime.GOMAXPROCS(old)
					if first == nil {
						first = c
						continue
					}
					require.Equal(t, first, c, "%dx%dx%d %c%c at %d threads", m, n, k, tA, tB, procs)
				}
			}
		}
	}
}

func BenchmarkSgemm1024(b *testing.B) {
	const n = 1024
	rng := rand.New(rand.NewPCG(1, 1))
	x, y, out := randSlice(rng, n*n), randSlice(rng, n*n), make([]float32, n*n)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		Sgemm(blas.NoTrans, blas.NoTrans, n, n, n, 1, x, n, y, n, 0, out, n)
	}
	b.ReportMetric(2*n*n*n*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
}

// The AVX-512 kernels (pairs of panels, single panels) accumulate every
// element in the same order with the same fused multiply-adds as the AVX2
// kernel: the products are bitwise the same with and without them, in the flat path
// (up to 512 rows) and the blocked one, for every transpose, partial
// panels and partial row panels included.
func TestPairKernelIsBitwiseTheSame(t *testing.T) {
	if kernelPair == nil {
		t.Skip("no AVX-512 on this CPU")
	}
	rng := rand.New(rand.NewPCG(4, 4))
	for _, s := range [][3]int{{128, 784, 400}, {256, 128, 784}, {784, 130, 256}, {61, 97, 300}, {600, 200, 64}} {
		m, n, k := s[0], s[1], s[2]
		for _, tA := range []blas.Transpose{blas.NoTrans, blas.Trans} {
			for _, tB := range []blas.Transpose{blas.NoTrans, blas.Trans} {
				a, b := randSlice(rng, m*k), randSlice(rng, k*n)
				c0 := randSlice(rng, m*n)
				lda, ldb := k, n
				if tA == blas.Trans {
					lda = m
				}
				if tB == blas.Trans {
					ldb = k
				}
				for _, beta := range []float32{0, 1} {
					with := append([]float32(nil), c0...)
					Sgemm(tA, tB, m, n, k, 1, a, lda, b, ldb, beta, with, n)
					saved, savedOne := kernelPair, kernel
					kernelPair, kernel = nil, kernelAVX2
					without := append([]float32(nil), c0...)
					Sgemm(tA, tB, m, n, k, 1, a, lda, b, ldb, beta, without, n)
					kernelPair, kernel = saved, savedOne
					require.Equal(t, without, with, "%dx%dx%d %c%c beta %v", m, n, k, tA, tB, beta)
				}
			}
		}
	}
}

// recorder is a Finisher that counts how often each element of C is
// finished and keeps its value at that moment.
type recorder struct {
	mu    sync.Mutex
	c     []float32
	ldc   int
	count []int
	seen  []float32
}

func (r *recorder) Finish(i0, i1, j0, j1 int) {
	r.mu.Lock()
	defer r.mu.Unlock()
	for i := i0; i < i1; i++ {
		for j := j0; j < j1; j++ {
			r.count[i*r.ldc+j]++
			r.seen[i*r.ldc+j] = r.c[i*r.ldc+j]
		}
	}
}

// SgemmThen finishes every element of C exactly once, after its value is
// final (the value Sgemm gives), in the flat path and the blocked one,
// serial and shared (common practice, no source).
func TestSgemmThenFinishesEveryBlockOnce(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 3))
	for _, s := range [][3]int{{128, 400, 784}, {64, 785, 512}, {7, 17, 3}, {600, 200, 150}, {20, 30, 0}} {
		m, n, k := s[0], s[1], s[2]
		a, b := randSlice(rng, m*k), randSlice(rng, k*n)
		want := make([]float32, m*n)
		Sgemm(blas.NoTrans, blas.NoTrans, m, n, k, 1, a, max(k, 1), b, n, 0, want, n)
		for _, procs := range []int{1, 2, 3} {
			c := make([]float32, m*n)
			r := &recorder{c: c, ldc: n, count: make([]int, m*n), seen: make([]float32, m*n)}
			old := runtime.GOMAXPROCS(procs)
			SgemmThen(blas.NoTrans, blas.NoTrans, m, n, k, 1, a, max(k, 1), b, n, 0, c, n, r)
			runtime.GOMAXPROCS(old)
			for i, v := range r.count {
				require.Equal(t, 1, v, "%dx%dx%d at %d threads: element %d finished %d times", m, n, k, procs, i, v)
			}
			require.Equal(t, want, r.seen, "%dx%dx%d at %d threads: values when finished", m, n, k, procs)
		}
	}
}

// A few rows (one scoring request) skip packing; every element must still
// get bitwise what the packed path gives it, for partial panels, several
// depth blocks and every beta, with the kernel in use and the Go one
// (common practice, no source: the packed path is checked against gonum
// in TestAgainstGonum).
func TestRowsDirectMatchesPackedPath(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	type kernels struct {
		row  func(int, int, []float32, []float32, int, []float32, bool)
		tile func(int, []float32, []float32, []float32, int, bool)
		pair func(int, []float32, []float32, []float32, []float32, int, bool)
	}
	for _, ks := range []kernels{{rowGo, kernelGo, nil}, {rowKernel, kernel, kernelPair}} {
		savedRow, savedTile, savedPair := rowKernel, kernel, kernelPair
		rowKernel, kernel, kernelPair = ks.row, ks.tile, ks.pair
		for m := 1; m < mr; m++ {
			for _, n := range []int{1, 15, 16, 17, 64, 70, 130} {
				for _, k := range []int{1, 255, 256, 257, 600} {
					for _, beta := range []float32{0, 1, 0.5} {
						a, b, c0 := randSlice(rng, m*k), randSlice(rng, k*n), randSlice(rng, m*n)
						want := append([]float32(nil), c0...)
						sgemmFlat(blas.NoTrans, blas.NoTrans, m, n, k, 1, a, k, b, n, beta, want, n, 1, nil)
						got := append([]float32(nil), c0...)
						scaleC(m, n, k, 1, beta, got, n)
						rowsDirect(m, n, k, a, k, b, n, beta, got, n)
						require.Equal(t, want, got, "m=%d n=%d k=%d beta=%v", m, n, k, beta)
						got = append(got[:0], c0...)
						Sgemm(blas.NoTrans, blas.NoTrans, m, n, k, 1, a, k, b, n, beta, got, n)
						require.Equal(t, want, got, "Sgemm m=%d n=%d k=%d beta=%v", m, n, k, beta)
					}
				}
			}
		}
		rowKernel, kernel, kernelPair = savedRow, savedTile, savedPair
	}
}
