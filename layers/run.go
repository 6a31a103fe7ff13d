package layers

import "fmt"

// Run computes the network's output for rows inputs of width In() in x,
// whatever the network's precision and whatever the caller's: values are
// converted to the network's precision, run through Forward32 or
// Forward64, and the result converted back into dst (grown if too short)
// and returned. Conversions are exact from float32 to float64 and rounded
// to nearest the other way, as Go's conversions are. Like the Forward
// methods it is safe for concurrent use with one Workspace per goroutine.
func Run[T float32 | float64](m *MLP, x []T, rows int, ws *Workspace, dst []T) ([]T, error) {
	if len(m.Layers) == 0 {
		return nil, fmt.Errorf("layers: MLP %q has no layers", m.Name)
	}
	if m.Precision() == Float64 {
		in, ok := any(x).([]float64)
		if !ok {
			ws.in64 = grow(ws.in64, len(x))
			in = ws.in64
			for i, v := range x {
				in[i] = float64(v)
			}
		}
		out, err := m.Forward64(in, rows, ws)
		if err != nil {
			return nil, err
		}
		return convertInto(dst, out), nil
	}
	in, ok := any(x).([]float32)
	if !ok {
		ws.in32 = grow(ws.in32, len(x))
		in = ws.in32
		for i, v := range x {
			in[i] = float32(v)
		}
	}
	out, err := m.Forward32(in, rows, ws)
	if err != nil {
		return nil, err
	}
	return convertInto(dst, out), nil
}

// convertInto copies src into dst (grown if too short), converting.
func convertInto[T, S float32 | float64](dst []T, src []S) []T {
	dst = grow(dst, len(src))
	if d, ok := any(dst).([]S); ok {
		copy(d, src)
		return dst
	}
	for i, v := range src {
		dst[i] = T(v)
	}
	return dst
}

// ParamShape is the name and shape of one parameter a network needs.
type ParamShape struct {
	Name       string
	Rows, Cols int
}

// MLPShapes lists the parameters NewMLP makes for an MLP of that name and
// widths, in Params order, without making them: a loader checks a file's
// tensors against it before allocating anything.
func MLPShapes(name string, widths []int) []ParamShape {
	return MLPConfig{Name: name, Widths: widths}.ParamShapes()
}

// ParamShapes lists the parameters NewMLP makes for c, in Params order,
// without making them (nothing for a plan that does not fit).
func (c MLPConfig) ParamShapes() []ParamShape {
	var s []ParamShape
	c = c.withDefaults()
	if c.Conv != nil && !c.Conv.Out {
		s = append(s, c.Conv.paramShapes(c.Name)...)
	}
	widths := c.denseWidths()
	if len(widths) > MaxLayers+2 {
		widths = widths[:MaxLayers+2] // a longer list is refused anyway
	}
	for i := 0; i+1 < len(widths); i++ {
		s = append(s, ParamShape{fmt.Sprintf("%s.%d.weight", c.Name, i), widths[i], widths[i+1]},
			ParamShape{fmt.Sprintf("%s.%d.bias", c.Name, i), 1, widths[i+1]})
	}
	if c.Conv != nil && c.Conv.Out {
		s = append(s, c.Conv.paramShapes(c.Name)...)
	}
	return s
}

// CheckWidths reports a network of these widths that NewMLP would refuse
// for its size (too many layers, a layer too wide, too many parameters),
// without building it.
func CheckWidths(name string, widths []int) error {
	return MLPConfig{Name: name, Widths: widths}.Validate()
}
