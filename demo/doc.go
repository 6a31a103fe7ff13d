// Package demo is the whole job of quern on an invented scenario: a fleet
// of water pumps (package fleet invents it) whose healthy history trains
// an autoencoder, whose hold-out week, with faults injected at known
// times, is scored against a calibrated threshold, and a report of what
// was found. "quern demo" runs it; the examples use the fleet too.
package demo
