package main

import (
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"github.com/quernlab/quern/train"
)

// progress shows training progress: a live bar redrawn in place on a
// terminal, plain log lines every few seconds otherwise, nothing with
// -quiet.
type progress struct {
	w     io.Writer
	tty   bool
	quiet bool
	last  time.Time
	drawn bool
}

func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}

func newProgress(w io.Writer, quiet bool) *progress {
	return &progress{w: w, tty: isTerminal(w), quiet: quiet}
}

func metricText(ms []train.Metric, n int) string {
	var b strings.Builder
	for i, m := range ms {
		if i == n {
			break
		}
		if i > 0 {
			b.WriteByte(' ')
		}
		fmt.Fprintf(&b, "%s %.4g", m.Name, m.Value)
	}
	return b.String()
}

func eta(d time.Duration) string {
	if d <= 0 {
		return "-"
	}
	return d.Round(time.Second).String()
}

func (p *progress) step(pr train.Progress) {
	if p.quiet {
		return
	}
	now := time.Now()
	if p.tty {
		if now.Sub(p.last) < 100*time.Millisecond && pr.Step != pr.Steps {
			return
		}
		p.last = now
		const width = 24
		done := width * pr.Step / max(pr.Steps, 1)
		bar := strings.Repeat("=", done) + strings.Repeat(" ", width-done)
		fmt.Fprintf(p.w, "\r\033[Kepoch %d/%d [%s] %d/%d  %s  %.0f rows/s  left %s",
			pr.Epoch, pr.Epochs, bar, pr.Step, pr.Steps, metricText(pr.Metrics, 3), pr.SamplesPerSec, eta(pr.Remaining))
		p.drawn = true
		return
	}
	if now.Sub(p.last) < 5*time.Second {
		return
	}
	p.last = now
	fmt.Fprintf(p.w, "epoch %d/%d step %d/%d %s %.0f rows/s, %s left\n",
		pr.Epoch, pr.Epochs, pr.Step, pr.Steps, metricText(pr.Metrics, 3), pr.SamplesPerSec, eta(pr.Remaining))
}

func (p *progress) epoch(pr train.Progress) {
	if p.quiet {
		return
	}
	if p.drawn {
		fmt.Fprint(p.w, "\r\033[K")
		p.drawn = false
	}
	line := fmt.Sprintf("epoch %d/%d  train %s", pr.Epoch, pr.Epochs, metricText(pr.Metrics, 4))
	if pr.Validation != nil {
		line += "  validation " + metricText(pr.Validation, 1)
	}
	fmt.Fprintf(p.w, "%s  (%.0f rows/s, %s left)\n", line, pr.SamplesPerSec, eta(pr.Remaining))
}

func (p *progress) done() {
	if p.drawn && !p.quiet {
		fmt.Fprint(p.w, "\r\033[K")
		p.drawn = false
	}
}

// note prints a line of its own (a warning), clearing a drawn line first.
func (p *progress) note(s string) {
	if p.quiet {
		return
	}
	p.done()
	fmt.Fprintln(p.w, s)
}
