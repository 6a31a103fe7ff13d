//go:build amd64 && !purego

package vec

//go:noescape
func sqErrAVX(pp, tp *float32, n int, acc *[4]float64)

// SqErr adds (float64(p[i]) - float64(t[i]))^2 into acc[i%4] for the
// largest multiple of 4 values of p (t at least as long), in order of i,
// each square rounded before it is added, and returns how many it took.
func SqErr(acc *[4]float64, p, t []float32) int {
	n := len(p) &^ 3
	if !Enabled || n == 0 {
		return 0
	}
	_ = t[n-1]
	sqErrAVX(&p[0], &t[0], n, acc)
	return n
}

//go:noescape
func scaledDiffAVX(dst, pp, tp *float32, n int, k float32)

// ScaledDiff writes k*(p[i] - t[i]) into dst for the largest multiple of
// 8 values of p (dst and t at least as long) and returns how many it
// wrote.
func ScaledDiff(dst, p, t []float32, k float32) int {
	n := len(p) &^ 7
	if !Enabled || n == 0 {
		return 0
	}
	_, _ = dst[n-1], t[n-1]
	scaledDiffAVX(&dst[0], &p[0], &t[0], n, k)
	return n
}
