package main

import (
	"context"
	"fmt"

	"github.com/quernlab/quern/demo"
	"github.com/quernlab/quern/train"
)

func cmdDemo(e *env, args []string) error {
	fs := newFlags(e, "demo", "[-scenario pumps|payments] [-out DIR] [-short]")
	scenario := fs.String("scenario", "pumps", "the invented scenario: pumps (a pump fleet's telemetry) or payments (card payments with text categories, identifiers, times and empty cells)")
	out := fs.String("out", "quern-demo", "folder for the data, model, scores and report")
	short := fs.Bool("short", false, "a smaller fleet and fewer epochs (for CI)")
	seed := fs.Uint64("seed", 1, "random seed for the fleet and the model")
	quiet := fs.Bool("quiet", false, "no progress output")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	st := newStatus(e.stderr, *quiet)
	defer st.end() // an error return leaves no phase drawn or ticking
	switch *scenario {
	case "pumps", "payments":
	default:
		return usagef("-scenario %q: want pumps or payments", *scenario)
	}
	cfg := demo.Config{Out: *out, Short: *short, Seed: *seed, Version: version(), Scenario: *scenario,
		Callbacks: train.Callbacks{OnStep: st.step, OnEpoch: func(p train.Progress, h *train.History) error {
			st.epoch(p, h)
			return nil
		}},
		// the demo's findings are its output: printed with -quiet too
		Say: func(s string) {
			st.clear()
			fmt.Fprintln(e.stdout, s)
		},
		Phase: func(name string) {
			if name == "" {
				st.end()
				return
			}
			st.begin(name, nil)
		}}
	if err := demo.Run(context.Background(), cfg); err != nil {
		return err
	}
	st.done()
	return nil
}
