// Package trainenv trains a model in one call, for the tests of the
// packages that train models (their external test packages).
package trainenv
