//go:build amd64 && !purego

package optim

import "golang.org/x/sys/cpu"

// adamAVX applies the float32 Adam step to n elements, n a multiple of 8,
// with c = {b1, 1-b1, b2, 1-b2, step, 1/sqrt(bc2), eps, decay}: the same
// operations in the same order as adam32 (no fused multiply-add), so the
// results are bitwise those of the Go loop.
//
//go:noescape
func adamAVX(wp, gp, mp, vp *float32, n int, c *[8]float32)

var haveAVX = cpu.X86.HasAVX

// adam32Fast runs adamAVX over the largest multiple of 8 elements and
// adam32 over the rest. Coupled weight decay stays in Go.
func adam32Fast(w, g, m, v []float32, k adamCoef) {
	n := len(w) &^ 7
	if !haveAVX || n == 0 || (!k.decoupled && k.wd != 0) {
		adam32(w, g, m, v, k)
		return
	}
	g, m, v = g[:len(w)], m[:len(w)], v[:len(w)]
	b1, b2 := float32(k.b1), float32(k.b2)
	decay := float32(1)
	if k.decoupled {
		decay = float32(1 - k.lr*k.wd)
	}
	c := [8]float32{b1, 1 - b1, b2, 1 - b2, float32(k.lr / k.bc1), float32(1 / k.sbc2), float32(k.eps), decay}
	adamAVX(&w[0], &g[0], &m[0], &v[0], n, &c)
	adam32(w[n:], g[n:], m[n:], v[n:], k)
}
