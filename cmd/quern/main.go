// Command quern trains autoencoders, variational autoencoders and GANs on
// CPU and uses them: anomaly scores, embeddings, samples, interpolations,
// an HTTP scoring service, and demos on an invented pump fleet and invented card payments.
//
// Run "quern help" for the commands and "quern COMMAND -h" for the flags
// of one.
package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"runtime/debug"
	"runtime/pprof"
	"sort"
	"strings"
	"time"
)

type env struct {
	stdout, stderr io.Writer
}

type command struct {
	summary string
	run     func(e *env, args []string) error
}

var commands map[string]command

func init() {
	commands = map[string]command{
		"train":       {"train a model (or a fleet of one per group, -group) on CSV, Parquet, idx or a folder of PNG images", cmdTrain},
		"score":       {"score rows against an autoencoder's or VAE's anomaly threshold (or a fleet's, each row by its group's model)", cmdScore},
		"encode":      {"write the codes (embeddings) of rows", cmdEncode},
		"sample":      {"draw samples from a VAE or GAN (CSV or PNG grid)", cmdSample},
		"interpolate": {"decode a path between two rows' codes", cmdInterpolate},
		"fidelity":    {"measure a VAE's or GAN's samples against held-out rows: per column, pairs, copies", cmdFidelity},
		"inspect":     {"describe a model file and check it", cmdInspect},
		"demo":        {"run the whole job on an invented scenario: a pump fleet, or card payments (-scenario payments)", cmdDemo},
		"serve":       {"serve a model or a fleet over HTTP (JSON): score, encode, reconstruct, sample", cmdServe},
		"evaluate":    {"measure anomaly scores against labelled rows (ROC, precision, recall); set a threshold again", cmdEvaluate},
		"merge":       {"assemble a fleet from the folders of its shards (quern train -group COLUMN -shard I/N)", cmdMerge},
		"version":     {"print the version, the Go toolchain, the build settings and the matrix kernel", cmdVersion},
	}
}

// usageError marks errors that should exit with status 2.
type usageError struct{ msg string }

func (u usageError) Error() string { return u.msg }

func usagef(format string, args ...any) error { return usageError{fmt.Sprintf(format, args...)} }

func main() {
	// the data are one long-lived, pointer-free block and the training
	// steps allocate nothing, so collecting garbage early costs little
	// and keeps the peak near the data's size (Go's default lets the heap
	// grow to twice the live data); GOGC, when set, decides instead
	if os.Getenv("GOGC") == "" {
		debug.SetGCPercent(gcPercent)
	}
	// QUERN_CPUPROFILE=FILE writes a CPU profile of the whole command,
	// for `go tool pprof` (where a job's time goes beyond the step)
	if path := os.Getenv("QUERN_CPUPROFILE"); path != "" {
		if f, err := os.Create(path); err == nil && pprof.StartCPUProfile(f) == nil {
			code := run(os.Args[1:], &env{stdout: os.Stdout, stderr: os.Stderr})
			pprof.StopCPUProfile()
			f.Close()
			os.Exit(code)
		}
		fmt.Fprintf(os.Stderr, "quern: QUERN_CPUPROFILE %s: cannot write the profile\n", path)
		os.Exit(1)
	}
	os.Exit(run(os.Args[1:], &env{stdout: os.Stdout, stderr: os.Stderr}))
}

// gcPercent is the command line's GOGC when the environment sets none.
const gcPercent = 40

func run(args []string, e *env) int {
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" || args[0] == "-help" {
		usage(e.stderr)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	c, ok := commands[args[0]]
	if !ok {
		near := ""
		for name := range commands {
			if d := editDistance(args[0], name); d <= 2 && d < len(name) && (near == "" || d < editDistance(args[0], near) || (d == editDistance(args[0], near) && name < near)) {
				near = name
			}
		}
		if near != "" {
			fmt.Fprintf(e.stderr, "quern: unknown command %q: did you mean %s? (quern help lists the commands)\n", args[0], near)
			return 2
		}
		fmt.Fprintf(e.stderr, "quern: unknown command %q (quern help lists the commands)\n", args[0])
		return 2
	}
	err := c.run(e, args[1:])
	switch {
	case err == nil:
		return 0
	case errors.Is(err, flag.ErrHelp):
		return 0
	}
	var u usageError
	if errors.As(err, &u) {
		fmt.Fprintf(e.stderr, "quern %s: %s\n", args[0], oneLine(err.Error()))
		return 2
	}
	fmt.Fprintf(e.stderr, "quern %s: %s\n", args[0], oneLine(err.Error()))
	return 1
}

func oneLine(s string) string { return strings.ReplaceAll(strings.TrimSpace(s), "\n", "; ") }

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: quern COMMAND [flags]")
	fmt.Fprintln(w, "\ncommands:")
	names := make([]string, 0, len(commands))
	for n := range commands {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		fmt.Fprintf(w, "  %-12s %s\n", n, commands[n].summary)
	}
	fmt.Fprintln(w, "\nRun \"quern COMMAND -h\" for a command's flags.")
}

// newFlags returns a flag set that reports errors instead of exiting. Its
// usage text is printed once, by parse, when -h is given.
func newFlags(e *env, name, synopsis string) *flag.FlagSet {
	fs := flag.NewFlagSet("quern "+name, flag.ContinueOnError)
	fs.SetOutput(e.stderr)
	fs.Usage = func() {
		fmt.Fprintf(fs.Output(), "usage: quern %s\n", strings.TrimSpace(name+" "+synopsis))
		any := false
		fs.VisitAll(func(*flag.Flag) { any = true })
		if any {
			fmt.Fprintf(fs.Output(), "\nflags:\n")
			fs.PrintDefaults()
		}
	}
	return fs
}

// parse parses flags, turning flag errors into one-line usage errors and
// refusing more than positional stray arguments. With -h it prints the
// usage once and returns flag.ErrHelp.
func parse(e *env, fs *flag.FlagSet, args []string, positional int) ([]string, error) {
	usage := fs.Usage
	fs.Usage = func() {} // the flag package would print it before returning
	fs.SetOutput(io.Discard)
	err := fs.Parse(args)
	fs.SetOutput(e.stderr)
	fs.Usage = usage
	if errors.Is(err, flag.ErrHelp) {
		fs.Usage()
		return nil, flag.ErrHelp
	}
	if err != nil {
		return nil, usageError{flagMessage(fs, err)}
	}
	if fs.NArg() > positional {
		return nil, usagef("unexpected argument %q (flags go before it? %s -h lists them)", fs.Arg(positional), fs.Name())
	}
	return fs.Args(), nil
}

// flagMessage rewrites the flag package's errors in the tool's words.
func flagMessage(fs *flag.FlagSet, err error) string {
	msg := err.Error()
	if name, ok := strings.CutPrefix(msg, "flag provided but not defined: "); ok {
		if near := nearestFlag(fs, strings.TrimLeft(name, "-")); near != "" {
			return fmt.Sprintf("unknown flag %s: did you mean -%s? (%s -h lists the flags)", name, near, fs.Name())
		}
		return fmt.Sprintf("unknown flag %s (%s -h lists the flags)", name, fs.Name())
	}
	if name, ok := strings.CutPrefix(msg, "flag needs an argument: "); ok {
		return fmt.Sprintf("%s needs a value", name)
	}
	// invalid value "x" for flag -epochs: parse error
	if rest, ok := strings.CutPrefix(msg, "invalid value "); ok {
		if val, tail, ok := strings.Cut(rest, " for flag "); ok {
			name, why, _ := strings.Cut(tail, ": ")
			want := "a valid value"
			if f := fs.Lookup(strings.TrimLeft(name, "-")); f != nil {
				want = flagKind(f)
			}
			if strings.Contains(why, "out of range") {
				return fmt.Sprintf("%s %s: out of range", name, val)
			}
			if !strings.Contains(why, "parse error") && !strings.Contains(why, "invalid syntax") && why != "" {
				return fmt.Sprintf("%s %s: %s", name, val, why)
			}
			return fmt.Sprintf("%s %s: want %s", name, val, want)
		}
	}
	return msg
}

// flagKind names what a flag takes, from its default's type.
func flagKind(f *flag.Flag) string {
	g, ok := f.Value.(flag.Getter)
	if !ok {
		return "a valid value"
	}
	switch g.Get().(type) {
	case int, int64:
		return "a whole number"
	case uint, uint64:
		return "a whole number, 0 or more"
	case float64:
		return "a number"
	case bool:
		return "true or false"
	case time.Duration:
		return "a duration such as 500ms, 10s or 2m"
	}
	return "a valid value"
}

// nearestFlag returns the flag of fs whose name is within two edits of
// name (the closest; the first in order on a tie), or "" when none is.
func nearestFlag(fs *flag.FlagSet, name string) string {
	best, bestD := "", 3
	fs.VisitAll(func(f *flag.Flag) {
		if d := editDistance(name, f.Name); d < bestD && d < len(f.Name) {
			best, bestD = f.Name, d
		}
	})
	return best
}

// editDistance is the Levenshtein distance between a and b (bytes).
func editDistance(a, b string) int {
	prev := make([]int, len(b)+1)
	cur := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			sub := prev[j-1]
			if a[i-1] != b[j-1] {
				sub++
			}
			cur[j] = min(sub, prev[j]+1, cur[j-1]+1)
		}
		prev, cur = cur, prev
	}
	return prev[len(b)]
}
