package layers

import (
	"fmt"

	"github.com/quernlab/quern/internal/kernel/gemm"
	"github.com/quernlab/quern/internal/kernel/vec"
	"gonum.org/v1/gonum/blas"
)

// ConvShape is a 2-D convolution's geometry over image rows stored
// channels last (a row holds H x W x C values, the layout of quern's image
// rows): OutC filters of KH x KW x C, moved Stride pixels at a time over
// the image padded with Pad zeros on every side. A filter's weights are a
// row of KH x KW x C values in that order, so the weights are an
// OutC x (KH*KW*C) matrix, and an output row holds OH x OW x OutC values.
type ConvShape struct {
	H, W, C      int
	OutC, KH, KW int
	Stride, Pad  int
}

// Check reports a geometry that makes no output or has a zero size.
func (s ConvShape) Check() error {
	if s.H <= 0 || s.W <= 0 || s.C <= 0 || s.OutC <= 0 || s.KH <= 0 || s.KW <= 0 || s.Stride <= 0 || s.Pad < 0 {
		return fmt.Errorf("layers: convolution %+v: sizes must be positive (padding 0 or more)", s)
	}
	if oh, ow := s.Out(); oh <= 0 || ow <= 0 || s.H+2*s.Pad < s.KH || s.W+2*s.Pad < s.KW {
		return fmt.Errorf("layers: a %dx%d kernel does not fit a %dx%d image with padding %d", s.KH, s.KW, s.H, s.W, s.Pad)
	}
	return nil
}

// Out is the output's height and width.
func (s ConvShape) Out() (oh, ow int) {
	return (s.H+2*s.Pad-s.KH)/s.Stride + 1, (s.W+2*s.Pad-s.KW)/s.Stride + 1
}

// K is a filter's length, KH*KW*C.
func (s ConvShape) K() int { return s.KH * s.KW * s.C }

// InWidth and OutWidth are an input and an output row's lengths.
func (s ConvShape) InWidth() int { return s.H * s.W * s.C }

func (s ConvShape) OutWidth() int {
	oh, ow := s.Out()
	return oh * ow * s.OutC
}

// Im2Col writes the patches of n image rows x into cols, one row of K()
// values per output position (n*OH*OW rows), zeros where a patch reaches
// into the padding, and returns it (grown if too short). A kernel row's
// pixels lie side by side in the image, so each is one copy.
func Im2Col[T float32 | float64](cols, x []T, n int, s ConvShape) []T {
	oh, ow := s.Out()
	k := s.K()
	need := n * oh * ow * k
	if cap(cols) < need {
		cols = make([]T, need)
	}
	cols = cols[:need]
	in := s.InWidth()
	run := s.KW * s.C
	at := 0
	for img := 0; img < n; img++ {
		im := x[img*in : (img+1)*in]
		for oy := 0; oy < oh; oy++ {
			for ox := 0; ox < ow; ox++ {
				x0 := ox*s.Stride - s.Pad
				lo, hi := max(x0, 0), min(x0+s.KW, s.W)
				for ky := 0; ky < s.KH; ky++ {
					y := oy*s.Stride - s.Pad + ky
					dst := cols[at : at+run]
					at += run
					if y < 0 || y >= s.H || lo >= hi {
						clear(dst)
						continue
					}
					// zeros left and right of the image, the pixels between
					left := (lo - x0) * s.C
					clear(dst[:left])
					row := (y * s.W) * s.C
					m := copy(dst[left:], im[row+lo*s.C:row+hi*s.C])
					clear(dst[left+m:])
				}
			}
		}
	}
	return cols
}

// Col2Im adds the patch rows of dcols (as Im2Col lays them out) back into
// the n image rows dx, which it clears first: the gradient of Im2Col.
// Each pixel receives its patches' values in the same order whatever the
// build (float32 runs add eight at a time on amd64, one rounding each).
func Col2Im[T float32 | float64](dx, dcols []T, n int, s ConvShape) {
	oh, ow := s.Out()
	in := s.InWidth()
	clear(dx[:n*in])
	run := s.KW * s.C
	at := 0
	for img := 0; img < n; img++ {
		im := dx[img*in : (img+1)*in]
		for oy := 0; oy < oh; oy++ {
			for ox := 0; ox < ow; ox++ {
				x0 := ox*s.Stride - s.Pad
				lo, hi := max(x0, 0), min(x0+s.KW, s.W)
				for ky := 0; ky < s.KH; ky++ {
					y := oy*s.Stride - s.Pad + ky
					src := dcols[at : at+run]
					at += run
					if y < 0 || y >= s.H || lo >= hi {
						continue
					}
					src = src[(lo-x0)*s.C : (hi-x0)*s.C]
					row := (y * s.W) * s.C
					addRun(im[row+lo*s.C:row+hi*s.C], src)
				}
			}
		}
	}
}

// addRun adds src into dst element by element.
func addRun[T float32 | float64](dst, src []T) {
	done := 0
	if d32, ok := any(dst).([]float32); ok {
		done = vec.Add(d32, any(src).([]float32))
	}
	src = src[:len(dst)]
	for i := done; i < len(dst); i++ {
		dst[i] += src[i]
	}
}

// ConvForward computes n output rows of the convolution of image rows x
// with weights w (OutC x K) and bias b (OutC) into out (grown if too
// short), using cols as the patch buffer; it returns both buffers.
// float32 runs on the project's matrix product (internal/kernel/gemm, the
// same at any thread count), float64 (for gradient checks) in plain loops.
func ConvForward[T float32 | float64](out, cols, x, w, b []T, n int, s ConvShape) ([]T, []T) {
	cols = Im2Col(cols, x, n, s)
	oh, ow := s.Out()
	pos, k := n*oh*ow, s.K()
	if cap(out) < pos*s.OutC {
		out = make([]T, pos*s.OutC)
	}
	out = out[:pos*s.OutC]
	if c32, ok := any(cols).([]float32); ok {
		// float32: the project's matrix product, patches x filters^T,
		// then the bias
		o32, w32, b32 := any(out).([]float32), any(w).([]float32), any(b).([]float32)
		gemm.Sgemm(blas.NoTrans, blas.Trans, pos, s.OutC, k, 1, c32, k, w32, k, 0, o32, s.OutC)
		for p := 0; p < pos; p++ {
			o := o32[p*s.OutC : (p+1)*s.OutC]
			for f := range o {
				o[f] += b32[f]
			}
		}
		return out, cols
	}
	for p := 0; p < pos; p++ {
		patch := cols[p*k : (p+1)*k]
		o := out[p*s.OutC : (p+1)*s.OutC]
		for f := 0; f < s.OutC; f++ {
			wf := w[f*k : (f+1)*k]
			var acc T
			for i, v := range patch {
				acc += v * wf[i]
			}
			o[f] = acc + b[f]
		}
	}
	return out, cols
}

// ConvBackward computes the gradients of a loss with respect to the
// input rows (dx), the weights (dw) and the bias (db), given its
// gradient g with respect to the n output rows, the patches cols of the
// forward pass (Im2Col of x) and the weights w; dcols is a buffer of
// cols' size (grown if too short) and is returned. It is
// ConvFilterGrad and, when dx is not nil, ConvInputGrad.
func ConvBackward[T float32 | float64](dx, dw, db, dcols, g, cols, w []T, n int, s ConvShape) []T {
	ConvFilterGrad(dw, db, g, cols, n, s)
	if dx != nil {
		dcols = ConvInputGrad(dx, dcols, g, w, n, s)
	}
	return dcols
}

// ConvFilterGrad computes the gradients of a loss with respect to a
// convolution's weights (dw, OutC x K) and bias (db), given its gradient
// g with respect to the n output rows and the forward's patches cols.
func ConvFilterGrad[T float32 | float64](dw, db, g, cols []T, n int, s ConvShape) {
	oh, ow := s.Out()
	pos, k := n*oh*ow, s.K()
	clear(dw[:s.OutC*k])
	clear(db[:s.OutC])
	if g32, ok := any(g).([]float32); ok {
		// dw = g^T patches, by the matrix product
		gemm.Sgemm(blas.Trans, blas.NoTrans, s.OutC, k, pos, 1, g32, s.OutC, any(cols).([]float32), k, 0, any(dw).([]float32), k)
	}
	for p := 0; p < pos; p++ {
		gp := g[p*s.OutC : (p+1)*s.OutC]
		for f, gv := range gp {
			db[f] += gv
		}
		if _, ok := any(g).([]float32); ok {
			continue
		}
		patch := cols[p*k : (p+1)*k]
		for f, gv := range gp {
			if gv == 0 {
				continue
			}
			dwf := dw[f*k : (f+1)*k]
			for i, v := range patch {
				dwf[i] += gv * v
			}
		}
	}
}

// ConvInputGrad computes the gradient of a loss with respect to a
// convolution's n input rows (dx), given its gradient g with respect to
// the output rows and the weights w; dcols is a patch buffer (grown if
// too short) and is returned.
func ConvInputGrad[T float32 | float64](dx, dcols, g, w []T, n int, s ConvShape) []T {
	oh, ow := s.Out()
	pos, k := n*oh*ow, s.K()
	if cap(dcols) < pos*k {
		dcols = make([]T, pos*k)
	}
	dcols = dcols[:pos*k]
	if g32, ok := any(g).([]float32); ok {
		// dpatches = g w, by the matrix product
		gemm.Sgemm(blas.NoTrans, blas.NoTrans, pos, k, s.OutC, 1, g32, s.OutC, any(w).([]float32), k, 0, any(dcols).([]float32), k)
	} else {
		for p := 0; p < pos; p++ {
			dpatch := dcols[p*k : (p+1)*k]
			clear(dpatch)
			for f, gv := range g[p*s.OutC : (p+1)*s.OutC] {
				if gv == 0 {
					continue
				}
				for i, wv := range w[f*k : (f+1)*k] {
					dpatch[i] += gv * wv
				}
			}
		}
	}
	Col2Im(dx, dcols, n, s)
	return dcols
}

// The transposed convolution (a fractionally strided convolution, the
// gradient of a convolution with respect to its input) maps an image of
// H x W x Cin to one of OH x OW x Cout, each input pixel spreading a
// KH x KW x Cout patch of its filters' weights, Stride pixels apart. It
// is described by the convolution it transposes: ConvShape{H: OH, W: OW,
// C: Cout, OutC: Cin, ...}, whose Out() is the transposed one's input
// size (H, W). Its weights are Cin x (KH*KW*Cout), a row per input
// channel; its bias has Cout values.

// TransposedShape is the ConvShape a transposed convolution of an
// h x w x cin image to cout channels with a kh x kw kernel, stride and
// padding describes itself by, with outPad extra rows and columns at the
// bottom and right (0 <= outPad < stride), as in
// (h-1)*stride - 2*pad + kh + outPad output rows.
func TransposedShape(h, w, cin, cout, kh, kw, stride, pad, outPad int) (ConvShape, error) {
	if outPad < 0 || (stride > 0 && outPad >= stride) {
		return ConvShape{}, fmt.Errorf("layers: output padding %d, want 0 to stride-1 (%d)", outPad, stride-1)
	}
	s := ConvShape{H: (h-1)*stride - 2*pad + kh + outPad, W: (w-1)*stride - 2*pad + kw + outPad, C: cout, OutC: cin, KH: kh, KW: kw, Stride: stride, Pad: pad}
	if err := s.Check(); err != nil {
		return s, err
	}
	if oh, ow := s.Out(); oh != h || ow != w {
		return s, fmt.Errorf("layers: a transposed convolution of %dx%d with kernel %dx%d, stride %d and padding %d gives no whole output", h, w, kh, kw, stride, pad)
	}
	return s, nil
}

// ConvTransposeForward computes n output rows (OH*OW*Cout each, s.H x
// s.W x s.C) of the transposed convolution of rows x (s.Out() x s.OutC
// each) with weights w (s.OutC x s.K()) and bias b (s.C), into out (grown
// if too short), using cols as the patch buffer; it returns both.
func ConvTransposeForward[T float32 | float64](out, cols, x, w, b []T, n int, s ConvShape) ([]T, []T) {
	oh, ow := s.Out()
	pos, k := n*oh*ow, s.K()
	if cap(cols) < pos*k {
		cols = make([]T, pos*k)
	}
	cols = cols[:pos*k]
	if x32, ok := any(x).([]float32); ok {
		// float32: patches = inputs x weights, by the matrix product
		gemm.Sgemm(blas.NoTrans, blas.NoTrans, pos, k, s.OutC, 1, x32, s.OutC, any(w).([]float32), k, 0, any(cols).([]float32), k)
	} else {
		transposePatches(cols, x, w, pos, k, s.OutC)
	}
	in := s.InWidth()
	if cap(out) < n*in {
		out = make([]T, n*in)
	}
	out = out[:n*in]
	Col2Im(out, cols, n, s)
	for i := range out {
		out[i] += b[i%s.C]
	}
	return out, cols
}

// transposePatches is cols = x w for pos rows of cin inputs and k
// patch values.
func transposePatches[T float32 | float64](cols, x, w []T, pos, k, cin int) {
	for p := 0; p < pos; p++ {
		xp := x[p*cin : (p+1)*cin]
		cp := cols[p*k : (p+1)*k]
		clear(cp)
		for ci, v := range xp {
			if v == 0 {
				continue
			}
			wr := w[ci*k : (ci+1)*k]
			for i := range cp {
				cp[i] += v * wr[i]
			}
		}
	}
}

// ConvTransposeBackward computes the gradients of a loss with respect to
// the transposed convolution's input rows (dx), weights (dw) and bias
// (db), given its gradient g with respect to the n output rows, the
// input x and the weights w; gcols is a buffer (grown if too short) and
// is returned. It is Im2Col of g, ConvTransposeFilterGrad and, when dx
// is not nil, ConvTransposeInputGrad.
func ConvTransposeBackward[T float32 | float64](dx, dw, db, gcols, g, x, w []T, n int, s ConvShape) []T {
	gcols = Im2Col(gcols, g, n, s)
	ConvTransposeFilterGrad(dw, db, gcols, g, x, n, s)
	if dx != nil {
		ConvTransposeInputGrad(dx, gcols, w, n, s)
	}
	return gcols
}

// ConvTransposeFilterGrad computes the gradients of a loss with respect
// to a transposed convolution's weights (dw) and bias (db), given its
// gradient g with respect to the n output rows, gcols = Im2Col of g, and
// the input x.
func ConvTransposeFilterGrad[T float32 | float64](dw, db, gcols, g, x []T, n int, s ConvShape) {
	oh, ow := s.Out()
	pos, k := n*oh*ow, s.K()
	clear(dw[:s.OutC*k])
	clear(db[:s.C])
	for i, v := range g[:n*s.InWidth()] {
		db[i%s.C] += v
	}
	if gc32, ok := any(gcols).([]float32); ok {
		// dw = x^T gpatches
		gemm.Sgemm(blas.Trans, blas.NoTrans, s.OutC, k, pos, 1, any(x).([]float32), s.OutC, gc32, k, 0, any(dw).([]float32), k)
		return
	}
	for p := 0; p < pos; p++ {
		gp := gcols[p*k : (p+1)*k]
		for ci, xv := range x[p*s.OutC : (p+1)*s.OutC] {
			dwr := dw[ci*k : (ci+1)*k]
			for i, gv := range gp {
				dwr[i] += xv * gv
			}
		}
	}
}

// ConvTransposeInputGrad computes the gradient of a loss with respect to
// a transposed convolution's n input rows (dx), given gcols = Im2Col of
// its gradient with respect to the output rows and the weights w.
func ConvTransposeInputGrad[T float32 | float64](dx, gcols, w []T, n int, s ConvShape) {
	oh, ow := s.Out()
	pos, k := n*oh*ow, s.K()
	if gc32, ok := any(gcols).([]float32); ok {
		// dx = gpatches w^T
		gemm.Sgemm(blas.NoTrans, blas.Trans, pos, s.OutC, k, 1, gc32, k, any(w).([]float32), k, 0, any(dx).([]float32), s.OutC)
		return
	}
	for p := 0; p < pos; p++ {
		gp := gcols[p*k : (p+1)*k]
		dxp := dx[p*s.OutC : (p+1)*s.OutC]
		for ci := range dxp {
			var acc T
			for i, gv := range gp {
				acc += gv * w[ci*k+i]
			}
			dxp[ci] = acc
		}
	}
}
