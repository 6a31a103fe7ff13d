//go:build !amd64 || purego

package vec

// Enabled is false: there is no vector kernel in this build.
var Enabled = false

// BCE handles nothing in this build; see the amd64 version.
func BCE(d, x, y []float32) (float64, int) { return 0, 0 }

// NonFinite looks at nothing in this build; see the amd64 version.
func NonFinite(g []float32) (bool, int) { return false, 0 }

// Add adds nothing in this build; see the amd64 version.
func Add(dst, src []float32) int { return 0 }

// Leaky writes nothing in this build; see the amd64 version.
func Leaky(dst, x, g []float32, slope float32) int { return 0 }

// Tanh writes nothing in this build; see the amd64 version.
func Tanh(dst, x []float32) int { return 0 }

// SqErr takes nothing in this build; see the amd64 version.
func SqErr(acc *[4]float64, p, t []float32) int { return 0 }

// ScaledDiff writes nothing in this build; see the amd64 version.
func ScaledDiff(dst, p, t []float32, k float32) int { return 0 }
