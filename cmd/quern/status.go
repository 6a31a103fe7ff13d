package main

import (
	"fmt"
	"io"
	"os"
	"strings"
	"sync"
	"time"

	"github.com/quernlab/quern/train"
)

// status is the command line's account of a long job, phase by phase
// (load, train, calibrate, score, write, report). On a terminal one line
// of labelled fields is rewritten in place, for example
//
//	train  epoch 3/20  step 41/51  loss=0.04492  1.38M rows/s  4s to go
//
// and each finished epoch leaves a line of its own. Elsewhere (a log file,
// a pipe) the same fields come as plain lines at most every few seconds.
// With -quiet it prints nothing. Each phase's wall time is kept for the
// closing "time:" line.
type status struct {
	w     io.Writer
	tty   bool
	quiet bool
	every time.Duration // between plain lines

	mu   sync.Mutex
	last time.Time
	// lastKept is when the last epoch line was kept
	lastKept time.Time
	drawn    bool
	phase    string
	start    time.Time
	detail   func() string // the current phase's fields, for the ticker
	fields   string        // the fields last shown
	stop     chan struct{}
	times    []phaseTime
	begun    time.Time
}

type phaseTime struct {
	name string
	d    time.Duration
}

func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}

func newStatus(w io.Writer, quiet bool) *status {
	return &status{w: w, tty: isTerminal(w), quiet: quiet, every: 5 * time.Second, begun: time.Now()}
}

// begin starts a phase. Until end, a ticker redraws the line with the
// phase's elapsed time and whatever detail reports (may be nil), so a
// phase with no steps of its own still shows that it is alive.
func (s *status) begin(name string, detail func() string) {
	s.end()
	s.mu.Lock()
	defer s.mu.Unlock()
	s.phase, s.start, s.detail, s.fields = name, time.Now(), detail, ""
	s.last = time.Time{}
	if s.quiet {
		return
	}
	s.stop = make(chan struct{})
	go s.tick(s.stop)
}

func (s *status) tick(stop chan struct{}) {
	period := 200 * time.Millisecond
	if !s.tty {
		period = max(s.every, period)
	}
	t := time.NewTicker(period)
	defer t.Stop()
	for {
		select {
		case <-stop:
			return
		case <-t.C:
			s.mu.Lock()
			if s.detail != nil || time.Since(s.start) > time.Second {
				d := s.fields
				if s.detail != nil {
					d = s.detail()
				}
				s.drawLocked(d, s.tty)
			}
			s.mu.Unlock()
		}
	}
}

// end closes the current phase and records its wall time.
func (s *status) end() {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.phase == "" {
		return
	}
	if s.stop != nil {
		close(s.stop)
		s.stop = nil
	}
	s.clearLocked()
	s.times = append(s.times, phaseTime{s.phase, time.Since(s.start)})
	s.phase, s.detail = "", nil
}

// show draws the phase's line with these fields, no more often than the
// terminal or log can use.
func (s *status) show(fields string) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.drawLocked(fields, false)
}

func (s *status) drawLocked(fields string, force bool) {
	if s.quiet || s.phase == "" {
		return
	}
	now := time.Now()
	gap := 100 * time.Millisecond
	if !s.tty {
		gap = s.every
	}
	if !force && now.Sub(s.last) < gap {
		s.fields = fields // drawn by the ticker if nothing newer comes
		return
	}
	s.last, s.fields = now, fields
	line := s.phase + "  " + fields
	if fields == "" {
		line = s.phase
	}
	if el := now.Sub(s.start); el >= time.Second {
		line += "  " + shortDuration(el) + " so far"
	}
	if s.tty {
		fmt.Fprintf(s.w, "\r\033[K%s", line)
		s.drawn = true
		return
	}
	fmt.Fprintln(s.w, line)
}

func (s *status) clearLocked() {
	if s.drawn {
		fmt.Fprint(s.w, "\r\033[K")
		s.drawn = false
	}
}

// clear removes a drawn status line, so that another writer's line
// starts at the left edge.
func (s *status) clear() {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.clearLocked()
}

// say prints a line of its own (a result or a warning), clearing a drawn
// status line first. -quiet keeps it back.
func (s *status) say(format string, a ...any) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.quiet {
		return
	}
	s.clearLocked()
	fmt.Fprintf(s.w, format+"\n", a...)
}

// result prints a result line (what was written, the threshold), with
// -quiet too.
func (s *status) result(format string, a ...any) { s.warn(format, a...) }

// warn prints a warning on a line of its own, with -quiet too: it says
// something about the result, not about progress.
func (s *status) warn(format string, a ...any) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.clearLocked()
	fmt.Fprintf(s.w, format+"\n", a...)
}

// closing returns the phases' wall times as one line:
//
//	time: load 0.21s, train 3.1s, calibrate 0.05s, write 0.01s; 3.4s in all
func (s *status) closing() string {
	s.end()
	s.mu.Lock()
	defer s.mu.Unlock()
	parts := make([]string, len(s.times))
	for i, p := range s.times {
		parts[i] = p.name + " " + shortDuration(p.d)
	}
	return "time: " + strings.Join(parts, ", ") + "; " + shortDuration(time.Since(s.begun)) + " in all"
}

// done prints the closing line unless quiet.
func (s *status) done() {
	line := s.closing()
	if !s.quiet {
		fmt.Fprintln(s.w, line)
	}
}

// shortDuration writes a duration with two or three significant digits:
// 3ms, 0.42s, 4.2s, 37s, 2m05s, 1h20m.
func shortDuration(d time.Duration) string {
	switch {
	case d < time.Millisecond:
		return "<1ms"
	case d < 100*time.Millisecond:
		return fmt.Sprintf("%dms", d.Milliseconds())
	case d < 10*time.Second:
		return fmt.Sprintf("%.2gs", d.Seconds())
	case d < time.Minute:
		return fmt.Sprintf("%.0fs", d.Seconds())
	case d < time.Hour:
		return fmt.Sprintf("%dm%02ds", int(d.Minutes()), int(d.Seconds())%60)
	}
	return fmt.Sprintf("%dh%02dm", int(d.Hours()), int(d.Minutes())%60)
}

// rate writes rows a second compactly: 950, 12.3k, 1.38M.
func rate(v float64) string {
	switch {
	case v >= 1e6:
		return fmt.Sprintf("%.3gM", v/1e6)
	case v >= 1e4:
		return fmt.Sprintf("%.3gk", v/1e3)
	}
	return fmt.Sprintf("%.0f", v)
}

// metricFields writes up to n metrics as name=value.
func metricFields(ms []train.Metric, n int, prefix string) string {
	var b strings.Builder
	for i, m := range ms {
		if i == n {
			break
		}
		if i > 0 && m.Value == ms[0].Value {
			continue // a term that is the whole loss, such as reconstruction
		}
		if i > 0 {
			b.WriteString("  ")
		}
		fmt.Fprintf(&b, "%s%s=%.4g", prefix, m.Name, m.Value)
	}
	return b.String()
}

func toGo(d time.Duration) string {
	if d < time.Second {
		return ""
	}
	return "  " + shortDuration(d) + " to go"
}

// step is train.Callbacks.OnStep: the training phase's line.
func (s *status) step(p train.Progress) {
	if s.quiet {
		return
	}
	s.show(fmt.Sprintf("epoch %d/%d  step %d/%d  %s  %s rows/s%s",
		p.Epoch, p.Epochs, p.Step, p.Steps, metricFields(p.Metrics, 3, ""), rate(p.SamplesPerSec), toGo(p.Remaining)))
}

// keptEpochGap is the least time between two kept epoch lines on a
// terminal (elsewhere: every); the epochs between only redraw the line.
const keptEpochGap = 2 * time.Second

// epoch is train.Callbacks.OnEpoch's printing: a kept line for the first
// epoch, the last, and an epoch at most every few seconds between (a
// run of thousands of short epochs on a small file would otherwise print
// thousands of lines); the others redraw the status line.
func (s *status) epoch(p train.Progress, h *train.History) {
	line := fmt.Sprintf("epoch %d/%d  %s", p.Epoch, p.Epochs, metricFields(p.Metrics, 4, ""))
	if p.Validation != nil {
		line += "  " + metricFields(p.Validation, 1, "validation ")
		if h != nil && h.BestEpoch == p.Epoch {
			line += " (best)"
		}
	}
	line = fmt.Sprintf("%s  %s rows/s%s", line, rate(p.SamplesPerSec), toGo(p.Remaining))
	s.mu.Lock()
	gap := keptEpochGap
	if !s.tty {
		gap = s.every
	}
	now := time.Now()
	keep := p.Epoch == 1 || p.Epoch == p.Epochs || now.Sub(s.lastKept) >= gap
	if keep {
		s.lastKept = now
	}
	s.mu.Unlock()
	if keep {
		s.say("%s", line)
	} else {
		s.show(line)
	}
}

// loaded returns a load phase's detail for data.Progress figures.
func loadDetail(path string, done, total *int64, mu *sync.Mutex) func() string {
	return func() string {
		mu.Lock()
		d, t := *done, *total
		mu.Unlock()
		if t > 0 && d <= t {
			return fmt.Sprintf("%s  %d%%", path, 100*d/t)
		}
		if d > 0 {
			return fmt.Sprintf("%s  %s read", path, sizeString(d))
		}
		return path
	}
}
