package main

import (
	"context"
	"errors"
	"fmt"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"github.com/quernlab/quern/anomaly"
	"github.com/quernlab/quern/data"
	"github.com/quernlab/quern/model"
	"github.com/quernlab/quern/report"
	"github.com/quernlab/quern/train"
	"github.com/quernlab/quern/watch"
)

// live is a training run's live page (-watch): its server and what it
// draws after each epoch.
type live struct {
	page   *watch.Page
	srv    *http.Server
	served chan struct{}
	url    string
	tmp    string
	last   time.Time
	val    *data.Dataset
	image  []int
	seed   uint64
	fa     float64
}

// watchAddr resolves -watch: a bare port or ":PORT" listens on loopback.
func watchAddr(s string) (string, error) {
	if !strings.Contains(s, ":") {
		if _, err := strconv.ParseUint(s, 10, 16); err != nil {
			return "", usagef("-watch %s: want HOST:PORT or a port number (a port alone listens on loopback)", s)
		}
		return "127.0.0.1:" + s, nil
	}
	if strings.HasPrefix(s, ":") {
		return "127.0.0.1" + s, nil
	}
	return s, nil
}

// startLive starts the live page's server on addr and says where it is.
func startLive(st *status, addr, title string) (*live, error) {
	addr, err := watchAddr(addr)
	if err != nil {
		return nil, err
	}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("-watch %s: %v", addr, errors.Unwrap(err))
	}
	tmp, err := os.MkdirTemp("", "quern-watch-")
	if err != nil {
		ln.Close()
		return nil, err
	}
	l := &live{page: watch.New(title), served: make(chan struct{}), tmp: tmp}
	l.srv = &http.Server{Handler: l.page.Handler(), ReadHeaderTimeout: 10 * time.Second}
	l.url = "http://" + ln.Addr().String() + "/"
	if ta, ok := ln.Addr().(*net.TCPAddr); ok && ta.IP.IsUnspecified() {
		// every interface: name the one a browser here can open
		l.url = fmt.Sprintf("http://localhost:%d/", ta.Port)
	}
	go func() {
		defer close(l.served)
		l.srv.Serve(ln)
	}()
	if !watch.Loopback(ln.Addr().String()) {
		st.say("warning: -watch %s is reachable from other machines: anyone who can reach it sees the run's figures", addr)
	}
	st.say("watch the run at %s", l.url)
	return l, nil
}

// step reports a training step.
func (l *live) step(p train.Progress) {
	if l == nil {
		return
	}
	l.page.SetStatus(watch.Status{Phase: "train", Epoch: p.Epoch, Epochs: p.Epochs, Step: p.Step, Steps: p.Steps,
		Metrics: metricMap(p.Metrics), RowsPerSec: p.SamplesPerSec, Remaining: p.Remaining.Seconds(), Elapsed: p.Elapsed.Seconds()})
}

func metricMap(ms []train.Metric) []watch.Metric {
	if ms == nil {
		return nil
	}
	out := make([]watch.Metric, len(ms))
	for i, x := range ms {
		out[i] = watch.Metric{Name: x.Name, Value: x.Value}
	}
	return out
}

// epoch reports a finished epoch and, at most every two seconds and at
// the last epoch, redraws the figures: samples of an image model, the
// validation rows' scores of a model with anomaly scores.
func (l *live) epoch(p train.Progress, h *train.History, m model.Model) {
	if l == nil {
		return
	}
	l.step(p)
	l.page.AddEpoch(watch.Epoch{Epoch: p.Epoch, Train: metricMap(p.Metrics), Validation: metricMap(p.Validation), Best: h != nil && h.BestEpoch == p.Epoch})
	if time.Since(l.last) < 2*time.Second && p.Epoch != p.Epochs {
		return
	}
	l.last = time.Now()
	if smp, ok := m.(model.Sampler); ok && len(l.image) == 3 {
		if s, err := smp.Sample(32, l.seed); err == nil {
			l.figure("samples", fmt.Sprintf("32 samples after epoch %d (the same draws each time).", p.Epoch), func(path string) error {
				return report.ImageGrid(path, s, l.image[0], l.image[1], l.image[2], 8, 3)
			})
		}
	}
	if sc, ok := m.(model.Scorer); ok && l.val != nil {
		x, n := firstRows(l.val, 2000)
		if s, err := sc.RowScores(x, n); err == nil {
			if th, err := anomaly.Calibrate(s, anomaly.Config{FalseAlarm: l.fa}); err == nil {
				l.figure("scores", fmt.Sprintf("Scores of %d validation rows after epoch %d; the dashed line is where the threshold would be now (the final one is set after training).", n, p.Epoch), func(path string) error {
					return report.ScoreHistogram(path, s, th.Value, nil, "score")
				})
			}
		}
	}
}

// figure renders a PNG through draw and puts it on the page.
func (l *live) figure(name, caption string, draw func(path string) error) {
	path := filepath.Join(l.tmp, name+".png")
	if draw(path) != nil {
		return
	}
	if b, err := os.ReadFile(path); err == nil {
		l.page.SetFigure(name, caption, b)
	}
}

// finish tells the page how the run ended and stops its server, giving
// open pages a moment to receive the news.
func (l *live) finish(how string) {
	if l == nil {
		return
	}
	l.page.Finish(how)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	if l.srv.Shutdown(ctx) != nil {
		l.srv.Close()
	}
	<-l.served
	os.RemoveAll(l.tmp)
}
