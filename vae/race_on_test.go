//go:build race

package vae

// raceBuild is set in race builds, whose instrumentation allocates: the
// tests that count allocations skip themselves there.
const raceBuild = true
