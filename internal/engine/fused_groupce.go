package engine

import (
	"fmt"
	"math"
	"strings"

	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// groupCEOp is the softmax cross-entropy of column groups, summed over
// rows and groups, a scalar: for each row and each span [from, to) of
// columns, T*LSE(x[from:to]) - sum_k t_k x_k, with T the sum of the span's
// targets (the cross-entropy -sum_k t_k log softmax(x)_k). A span whose
// targets are all zero adds nothing and gets no gradient with respect to
// x: a missing category. Columns outside every span take no part. The
// gradient is
// p_k*T - t_k with respect to x (p the span's softmax) and -log p_k with
// respect to t. The forward run leaves the log-softmax of each span in a
// buffer shared with both gradient operations.
type groupCEOp struct {
	opBase
	spans [][2]int
	side  *groupCESide
}

// groupCESide holds the log-softmax of every span from the last forward
// run (0 outside spans), rows x cols.
type groupCESide struct {
	ls []float64
}

// groupCEGradOp is g (p_k T - t_k) within spans, 0 elsewhere; its inputs
// are x (for the shape), t, the scalar upstream gradient g and the
// forward's output (to order it after the forward run).
type groupCEGradOp struct {
	opBase
	spans [][2]int
	side  *groupCESide
}

// groupCETargetGradOp is -g log p_k within spans, 0 elsewhere; inputs x,
// g and the forward's output.
type groupCETargetGradOp struct {
	opBase
	spans [][2]int
	side  *groupCESide
}

func spansName(spans [][2]int) string {
	var b strings.Builder
	for i, s := range spans {
		if i > 0 {
			b.WriteByte(',')
		}
		fmt.Fprintf(&b, "%d:%d", s[0], s[1])
	}
	return b.String()
}

func (op groupCEOp) Do(in ...G.Value) (G.Value, error) {
	t, err := denseArgs(in, 2)
	if err != nil {
		return nil, err
	}
	rows, cols := dims(t[0])
	n := rows * cols
	if cap(op.side.ls) < n {
		op.side.ls = make([]float64, n)
	}
	ls := op.side.ls[:n]
	var s float64
	switch t[0].Dtype() {
	case tensor.Float32:
		s = groupCE(ls, f32(t[0]), f32(t[1]), rows, cols, op.spans)
		return op.scalar32(float32(s)), nil
	case tensor.Float64:
		s = groupCE(ls, f64(t[0]), f64(t[1]), rows, cols, op.spans)
		return op.scalar64(s), nil
	}
	return nil, fmt.Errorf("engine: grouped cross-entropy of %v", t[0].Dtype())
}

// groupCE writes the spans' log-softmax into ls and returns the summed
// cross-entropy, in float64, rows in order (the same value at any thread
// count).
func groupCE[T float32 | float64](ls []float64, x, t []T, rows, cols int, spans [][2]int) float64 {
	clear(ls)
	var s float64
	for r := 0; r < rows; r++ {
		xr, tr, lr := x[r*cols:(r+1)*cols], t[r*cols:(r+1)*cols], ls[r*cols:(r+1)*cols]
		for _, sp := range spans {
			m := math.Inf(-1)
			for _, v := range xr[sp[0]:sp[1]] {
				m = math.Max(m, float64(v))
			}
			var z float64
			for _, v := range xr[sp[0]:sp[1]] {
				z += math.Exp(float64(v) - m)
			}
			lse := m + math.Log(z)
			for k := sp[0]; k < sp[1]; k++ {
				l := float64(xr[k]) - lse
				lr[k] = l
				if tr[k] != 0 {
					s -= float64(tr[k]) * l
				}
			}
		}
	}
	return s
}

func (op groupCEOp) SymDiff(in G.Nodes, output, grad *G.Node) (G.Nodes, error) {
	name := "GroupCEGrad[" + spansName(op.spans) + "]"
	gx, err := G.ApplyOp(groupCEGradOp{fused(name, "ttaat", firstInputShape), op.spans, op.side}, in[0], in[1], grad, output)
	if err != nil {
		return nil, err
	}
	name = "GroupCETargetGrad[" + spansName(op.spans) + "]"
	gt, err := G.ApplyOp(groupCETargetGradOp{fused(name, "taat", firstInputShape), op.spans, op.side}, in[0], grad, output)
	if err != nil {
		return nil, err
	}
	return G.Nodes{gx, gt}, nil
}

func (op groupCEGradOp) Do(in ...G.Value) (G.Value, error) { return op.UsePreallocDo(nil, in...) }

func (op groupCEGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	var stale bool
	out, err := op.elementwise(p, in, 2, true, func(o []float32, x [3][]float32, g float32, rows int) {
		if stale = len(op.side.ls) < len(o); !stale {
			groupCEGrad(o, x[1], op.side.ls, float64(g), rows, op.spans)
		}
	}, func(o []float64, x [3][]float64, g float64, rows int) {
		if stale = len(op.side.ls) < len(o); !stale {
			groupCEGrad(o, x[1], op.side.ls, g, rows, op.spans)
		}
	})
	if err == nil && stale {
		err = fmt.Errorf("engine: grouped cross-entropy gradient before its forward run")
	}
	return out, err
}

func groupCEGrad[T float32 | float64](o, t []T, ls []float64, g float64, rows int, spans [][2]int) {
	clear(o)
	cols := len(o) / max(rows, 1)
	for r := 0; r < rows; r++ {
		or, tr, lr := o[r*cols:(r+1)*cols], t[r*cols:(r+1)*cols], ls[r*cols:(r+1)*cols]
		for _, sp := range spans {
			var total float64
			for _, v := range tr[sp[0]:sp[1]] {
				total += float64(v)
			}
			if total == 0 {
				continue
			}
			for k := sp[0]; k < sp[1]; k++ {
				or[k] = T(g * (math.Exp(lr[k])*total - float64(tr[k])))
			}
		}
	}
}

func (op groupCETargetGradOp) Do(in ...G.Value) (G.Value, error) {
	return op.UsePreallocDo(nil, in...)
}

func (op groupCETargetGradOp) UsePreallocDo(p G.Value, in ...G.Value) (G.Value, error) {
	var stale bool
	out, err := op.elementwise(p, in, 1, true, func(o []float32, _ [3][]float32, g float32, rows int) {
		if stale = len(op.side.ls) < len(o); !stale {
			groupCETargetGrad(o, op.side.ls, float64(g), rows, op.spans)
		}
	}, func(o []float64, _ [3][]float64, g float64, rows int) {
		if stale = len(op.side.ls) < len(o); !stale {
			groupCETargetGrad(o, op.side.ls, g, rows, op.spans)
		}
	})
	if err == nil && stale {
		err = fmt.Errorf("engine: grouped cross-entropy gradient before its forward run")
	}
	return out, err
}

func groupCETargetGrad[T float32 | float64](o []T, ls []float64, g float64, rows int, spans [][2]int) {
	clear(o)
	cols := len(o) / max(rows, 1)
	for r := 0; r < rows; r++ {
		or, lr := o[r*cols:(r+1)*cols], ls[r*cols:(r+1)*cols]
		for _, sp := range spans {
			for k := sp[0]; k < sp[1]; k++ {
				or[k] = T(-g * lr[k])
			}
		}
	}
}

// GroupedSoftmaxCESum is the softmax cross-entropy of each span of
// columns [from, to) of logits x against the same columns of targets t,
// summed over rows and spans, one fused operation. Spans must be
// disjoint, inside the columns and at least two wide; a row whose targets
// in a span are all zero adds nothing for it.
func (gr *Graph) GroupedSoftmaxCESum(x, t *Node, spans [][2]int) *Node {
	if !gr.ok(x, t) {
		return &Node{g: gr}
	}
	if err := sameShape("grouped_softmax_ce", x, t); err != nil {
		return gr.fail("grouped_softmax_ce", err)
	}
	if x.IsScalar() {
		return gr.fail("grouped_softmax_ce", fmt.Errorf("scalar operands"))
	}
	if len(spans) == 0 {
		return gr.fail("grouped_softmax_ce", fmt.Errorf("no column groups"))
	}
	used := make([]bool, x.cols)
	for _, s := range spans {
		if s[0] < 0 || s[1] > x.cols || s[1]-s[0] < 2 {
			return gr.fail("grouped_softmax_ce", fmt.Errorf("columns [%d,%d) of %d are not a group of two or more", s[0], s[1], x.cols))
		}
		for k := s[0]; k < s[1]; k++ {
			if used[k] {
				return gr.fail("grouped_softmax_ce", fmt.Errorf("column %d is in two groups", k))
			}
			used[k] = true
		}
	}
	own := make([][2]int, len(spans))
	copy(own, spans)
	op := groupCEOp{fused("GroupCE["+spansName(own)+"]", "tta", reduction), own, &groupCESide{}}
	n, err := G.ApplyOp(op, x.n, t.n)
	return gr.wrap("grouped_softmax_ce", n, err, 0, 0)
}
