// Package gradcheck compares gradients computed by the graph engine with
// central finite differences in float64.
package gradcheck
