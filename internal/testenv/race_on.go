//go:build race

package testenv

// RaceBuild is set in race builds, whose instrumentation allocates: the
// tests that count allocations skip themselves there.
const RaceBuild = true
