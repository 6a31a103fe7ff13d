// Package fleet invents the demo scenario: a fleet of water pumps
// reporting hourly telemetry, with faults injected at known times. Nothing
// here is measured from real pumps; the relations are plausible shapes
// chosen so that an anomaly detector has something to find.
package fleet
