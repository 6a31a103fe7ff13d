package browser

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"
)

// Candidates are the programs tried, in order, when QUERN_CHROMIUM does
// not name one (Debian's package installs /usr/bin/chromium).
var Candidates = []string{"chromium", "chromium-browser", "google-chrome", "headless_shell"}

// ErrNoBrowser is returned by Start when no Chromium is installed.
var ErrNoBrowser = errors.New("browser: no Chromium found (install Debian's chromium package or set QUERN_CHROMIUM)")

// Browser is a running headless Chromium with one page.
type Browser struct {
	cmd     *exec.Cmd
	dir     string
	ws      *wsConn
	session string

	mu      sync.Mutex
	next    int
	waiting map[int]chan reply
	errs    []string // console errors and exceptions
	events  map[string]int
	done    chan struct{}
}

type reply struct {
	Result json.RawMessage `json:"result"`
	Error  *struct {
		Message string `json:"message"`
	} `json:"error"`
}

// find returns the path of a Chromium.
func find() (string, error) {
	if p := os.Getenv("QUERN_CHROMIUM"); p != "" {
		return p, nil
	}
	for _, c := range Candidates {
		if p, err := exec.LookPath(c); err == nil {
			return p, nil
		}
	}
	return "", ErrNoBrowser
}

var listening = regexp.MustCompile(`DevTools listening on (ws://\S+)`)

// Start launches a headless Chromium with a fresh profile and opens a
// blank page. The flags keep it off the network: no background
// connections, updates, sync or first-run pages.
func Start(ctx context.Context) (*Browser, error) {
	bin, err := find()
	if err != nil {
		return nil, err
	}
	dir, err := os.MkdirTemp("", "quern-chromium-")
	if err != nil {
		return nil, err
	}
	args := []string{"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
		"--disable-background-networking", "--disable-component-update", "--disable-sync", "--disable-extensions",
		"--remote-debugging-port=0", "--remote-allow-origins=*", "--user-data-dir=" + dir, "--window-size=1280,1000", "about:blank"}
	cmd := exec.Command(bin, args...)
	stderr, err := cmd.StderrPipe()
	if err != nil {
		os.RemoveAll(dir)
		return nil, err
	}
	if err := cmd.Start(); err != nil {
		os.RemoveAll(dir)
		return nil, fmt.Errorf("browser: %s: %w", bin, err)
	}
	found := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(stderr)
		for sc.Scan() {
			if m := listening.FindStringSubmatch(sc.Text()); m != nil {
				found <- m[1]
			}
		}
	}()
	b := &Browser{cmd: cmd, dir: dir, waiting: map[int]chan reply{}, events: map[string]int{}, done: make(chan struct{})}
	var url string
	select {
	case url = <-found:
	case <-time.After(30 * time.Second):
		b.Close()
		return nil, fmt.Errorf("browser: %s did not say where its DevTools listen within 30s", bin)
	case <-ctx.Done():
		b.Close()
		return nil, ctx.Err()
	}
	if b.ws, err = dialWS(url, 10*time.Second); err != nil {
		b.Close()
		return nil, err
	}
	go b.readLoop()
	var target struct {
		TargetID string `json:"targetId"`
	}
	if err := b.call(ctx, "", "Target.createTarget", map[string]any{"url": "about:blank"}, &target); err != nil {
		b.Close()
		return nil, err
	}
	var att struct {
		SessionID string `json:"sessionId"`
	}
	if err := b.call(ctx, "", "Target.attachToTarget", map[string]any{"targetId": target.TargetID, "flatten": true}, &att); err != nil {
		b.Close()
		return nil, err
	}
	b.session = att.SessionID
	for _, domain := range []string{"Runtime.enable", "Log.enable", "Page.enable"} {
		if err := b.call(ctx, b.session, domain, nil, nil); err != nil {
			b.Close()
			return nil, err
		}
	}
	return b, nil
}

// ForTest starts a browser for t and closes it when t ends; without a
// Chromium it skips t, or fails it where the environment variable CI is
// set (CI installs one).
func ForTest(t testing.TB) *Browser {
	t.Helper()
	b, err := Start(context.Background())
	if errors.Is(err, ErrNoBrowser) && os.Getenv("CI") == "" {
		t.Skip(err)
	}
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(b.Close)
	return b
}

func (b *Browser) readLoop() {
	defer close(b.done)
	for {
		msg, err := b.ws.read()
		if err != nil {
			return
		}
		var m struct {
			ID     int             `json:"id"`
			Method string          `json:"method"`
			Params json.RawMessage `json:"params"`
			reply
		}
		if json.Unmarshal(msg, &m) != nil {
			continue
		}
		b.mu.Lock()
		if m.ID != 0 {
			if ch, ok := b.waiting[m.ID]; ok {
				ch <- m.reply
				delete(b.waiting, m.ID)
			}
		} else {
			b.events[m.Method]++
			if e := consoleError(m.Method, m.Params); e != "" {
				b.errs = append(b.errs, e)
			}
		}
		b.mu.Unlock()
	}
}

// consoleError describes an event that is an error on the page, or
// returns "".
func consoleError(method string, params json.RawMessage) string {
	switch method {
	case "Runtime.consoleAPICalled":
		var p struct {
			Type string `json:"type"`
			Args []struct {
				Value       any    `json:"value"`
				Description string `json:"description"`
			} `json:"args"`
		}
		if json.Unmarshal(params, &p) == nil && (p.Type == "error" || p.Type == "assert") {
			var parts []string
			for _, a := range p.Args {
				if a.Description != "" {
					parts = append(parts, a.Description)
				} else {
					parts = append(parts, fmt.Sprint(a.Value))
				}
			}
			return "console." + p.Type + ": " + strings.Join(parts, " ")
		}
	case "Runtime.exceptionThrown":
		var p struct {
			Details struct {
				Text      string `json:"text"`
				Exception struct {
					Description string `json:"description"`
				} `json:"exception"`
			} `json:"exceptionDetails"`
		}
		if json.Unmarshal(params, &p) == nil {
			return "exception: " + p.Details.Text + " " + p.Details.Exception.Description
		}
	case "Log.entryAdded":
		var p struct {
			Entry struct {
				Level string `json:"level"`
				Text  string `json:"text"`
				URL   string `json:"url"`
			} `json:"entry"`
		}
		if json.Unmarshal(params, &p) == nil && p.Entry.Level == "error" {
			return "log: " + p.Entry.Text + " " + p.Entry.URL
		}
	}
	return ""
}

func (b *Browser) call(ctx context.Context, session, method string, params any, out any) error {
	b.mu.Lock()
	b.next++
	id := b.next
	ch := make(chan reply, 1)
	b.waiting[id] = ch
	b.mu.Unlock()
	msg := map[string]any{"id": id, "method": method}
	if params != nil {
		msg["params"] = params
	}
	if session != "" {
		msg["sessionId"] = session
	}
	raw, err := json.Marshal(msg)
	if err != nil {
		return err
	}
	if err := b.ws.send(raw); err != nil {
		return fmt.Errorf("browser: %s: %w", method, err)
	}
	select {
	case r := <-ch:
		if r.Error != nil {
			return fmt.Errorf("browser: %s: %s", method, r.Error.Message)
		}
		if out != nil {
			return json.Unmarshal(r.Result, out)
		}
		return nil
	case <-b.done:
		return fmt.Errorf("browser: %s: the browser went away", method)
	case <-ctx.Done():
		return ctx.Err()
	}
}

// Open loads url in the page and waits until document.readyState is
// "complete".
func (b *Browser) Open(ctx context.Context, url string) error {
	var nav struct {
		ErrorText string `json:"errorText"`
	}
	if err := b.call(ctx, b.session, "Page.navigate", map[string]any{"url": url}, &nav); err != nil {
		return err
	}
	if nav.ErrorText != "" {
		return fmt.Errorf("browser: %s: %s", url, nav.ErrorText)
	}
	return b.WaitFor(ctx, `document.readyState === "complete"`, 30*time.Second)
}

// Eval evaluates a JavaScript expression in the page (awaiting a promise)
// and decodes its value into out (may be nil).
func (b *Browser) Eval(ctx context.Context, expr string, out any) error {
	var r struct {
		Result struct {
			Value json.RawMessage `json:"value"`
		} `json:"result"`
		Exception *struct {
			Text string `json:"text"`
		} `json:"exceptionDetails"`
	}
	if err := b.call(ctx, b.session, "Runtime.evaluate", map[string]any{"expression": expr, "returnByValue": true, "awaitPromise": true}, &r); err != nil {
		return err
	}
	if r.Exception != nil {
		return fmt.Errorf("browser: %s: %s", expr, r.Exception.Text)
	}
	if out != nil && len(r.Result.Value) > 0 {
		return json.Unmarshal(r.Result.Value, out)
	}
	return nil
}

// WaitFor evaluates a boolean expression every 50 ms until it is true.
func (b *Browser) WaitFor(ctx context.Context, expr string, timeout time.Duration) error {
	deadline := time.Now().Add(timeout)
	for {
		var ok bool
		err := b.Eval(ctx, expr, &ok)
		if err == nil && ok {
			return nil
		}
		if time.Now().After(deadline) {
			if err != nil {
				return err
			}
			return fmt.Errorf("browser: %s still false after %s", expr, timeout)
		}
		time.Sleep(50 * time.Millisecond)
	}
}

// Errors returns the console errors and uncaught exceptions seen so far.
func (b *Browser) Errors() []string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return append([]string(nil), b.errs...)
}

// Screenshot returns a PNG of the page's viewport.
func (b *Browser) Screenshot(ctx context.Context) ([]byte, error) {
	var r struct {
		Data []byte `json:"data"`
	}
	err := b.call(ctx, b.session, "Page.captureScreenshot", map[string]any{"format": "png", "captureBeyondViewport": true}, &r)
	return r.Data, err
}

// Close ends the browser and removes its profile.
func (b *Browser) Close() {
	if b.ws != nil {
		b.call(context.Background(), "", "Browser.close", nil, nil)
		b.ws.close()
	}
	if b.cmd.Process != nil {
		done := make(chan struct{})
		go func() { b.cmd.Wait(); close(done) }()
		select {
		case <-done:
		case <-time.After(5 * time.Second):
			b.cmd.Process.Kill()
			<-done
		}
	}
	os.RemoveAll(b.dir)
}

// ImagesCheck is an expression whose value lists the page's images that
// did not load or have no size, as "src: reason" strings (empty: all fine).
const ImagesCheck = `Promise.all(Array.from(document.images).map(img => img.decode().then(() => img, () => img))).then(imgs =>
  imgs.filter(i => !(i.complete && i.naturalWidth > 0 && i.naturalHeight > 0 && i.getBoundingClientRect().width > 0))
      .map(i => i.getAttribute("src") + ": " + (i.naturalWidth ? "not shown" : "not loaded")))`
