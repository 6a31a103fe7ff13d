//go:build unix

// Command attacks replays, against a built quern binary, every attack of
// the hostile-input review: model files whose sealed metadata lies,
// servers fed such files at start-up and reload, checkpoints that name
// their own output, outputs that would replace inputs, values that
// overflow, compressed and image bombs, and the smaller holes (leftover
// temporary files, file modes, the bearer scheme, stopping under
// keep-alive load, a byte-order mark). Each attack prints "held" or
// "FAILED" with what was seen; the exit status is 1 if any failed.
//
//	go build -o /tmp/quern ./cmd/quern
//	go run ./scripts/attacks -bin /tmp/quern
//
// scripts/attacks.sh does both. An attack holds when the binary ends in a
// one-line error naming the problem (exit 1 or 2, no panic or runtime
// trace, peak memory under the attack's bound) or in a correct result,
// and no file it was not told to write changed. It takes about a minute,
// most of it making the bombs.
package main

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"image"
	"image/png"
	"io"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"time"

	"github.com/quernlab/quern/modelfile"
)

var (
	bin     = flag.String("bin", "", "the quern binary to attack (required)")
	root    = flag.String("root", ".", "the repository's root (for testdata)")
	keep    = flag.Bool("keep", false, "keep the working folder")
	work    string
	bc      string // the breast-cancer CSV
	bcFlags = []string{"-no-header", "-skip", "1", "-label", "c30"}
	failed  int
)

func main() {
	flag.Parse()
	if *bin == "" {
		fmt.Fprintln(os.Stderr, "attacks: -bin is required")
		os.Exit(2)
	}
	var err error
	if *bin, err = filepath.Abs(*bin); err != nil {
		fatal(err)
	}
	bc, err = filepath.Abs(filepath.Join(*root, "testdata", "sklearn", "breast_cancer.csv"))
	if err != nil {
		fatal(err)
	}
	if work, err = os.MkdirTemp("", "quern-attacks-"); err != nil {
		fatal(err)
	}
	setUp()
	lyingFiles()
	serverAttacks()
	checkpointPaths()
	outputsOverInputs()
	overflow()
	bombs()
	smaller()
	if failed > 0 {
		fmt.Printf("\n%d attack(s) FAILED\n", failed)
		exit(1)
	}
	fmt.Println("\nevery attack held")
	exit(0)
}

// exit removes the working folder (unless -keep) and exits.
func exit(code int) {
	if work != "" && !*keep {
		os.RemoveAll(work)
	}
	os.Exit(code)
}

func fatal(err error) {
	fmt.Fprintln(os.Stderr, "attacks:", err)
	exit(2)
}

// report prints one attack's outcome.
func report(name string, err error) {
	if err != nil {
		failed++
		fmt.Printf("FAILED  %-44s %v\n", name, err)
		return
	}
	fmt.Printf("held    %s\n", name)
}

func path(name string) string { return filepath.Join(work, name) }

// result is one run of the binary.
type result struct {
	code           int
	stdout, stderr string
	rssMB          float64
	took           time.Duration
}

// run runs the binary in the working folder with a time bound.
func run(env []string, args ...string) result {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	cmd := exec.CommandContext(ctx, *bin, args...)
	cmd.Dir = work
	cmd.Env = append(os.Environ(), env...)
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	start := time.Now()
	err := cmd.Run()
	r := result{stdout: out.String(), stderr: errb.String(), took: time.Since(start)}
	if cmd.ProcessState != nil {
		r.code = cmd.ProcessState.ExitCode()
		if ru, ok := cmd.ProcessState.SysUsage().(*syscall.Rusage); ok {
			r.rssMB = float64(ru.Maxrss) / 1024 // kilobytes on Linux
		}
	} else if err != nil {
		r.code = -1
		r.stderr += err.Error()
	}
	if ctx.Err() != nil {
		r.code = -1
		r.stderr += " (killed: over two minutes)"
	}
	return r
}

// refused checks that a run ended in a one-line error containing want
// (exit 1 or 2), with no panic or runtime trace, within maxMB of memory.
func refused(r result, want string, maxMB float64) error {
	msg := strings.TrimSpace(r.stderr)
	switch {
	case r.code != 1 && r.code != 2:
		return fmt.Errorf("exit %d, want a refusal (1 or 2): %.200q", r.code, msg)
	case strings.Contains(msg, "panic") || strings.Contains(msg, "goroutine ") || strings.Contains(msg, "fatal error"):
		return fmt.Errorf("a crash, not an error: %.200q", msg)
	case strings.Count(msg, "\n") > 0 && r.code == 1:
		return fmt.Errorf("%d lines of error, want one: %.200q", strings.Count(msg, "\n")+1, msg)
	case want != "" && !strings.Contains(msg, want):
		return fmt.Errorf("the error does not say %q: %.200q", want, msg)
	case maxMB > 0 && r.rssMB > maxMB:
		return fmt.Errorf("peak memory %.0f MB, bound %.0f MB (%s)", r.rssMB, maxMB, msg)
	}
	return nil
}

func succeeded(r result) error {
	if r.code != 0 {
		return fmt.Errorf("exit %d: %.300q", r.code, strings.TrimSpace(r.stderr))
	}
	return nil
}

func mustRun(args ...string) {
	if err := succeeded(run(nil, args...)); err != nil {
		fatal(fmt.Errorf("setting up (%s): %v", strings.Join(args, " "), err))
	}
}

func sum(p string) string {
	b, err := os.ReadFile(p)
	if err != nil {
		return "missing: " + err.Error()
	}
	return fmt.Sprintf("%x", sha256.Sum256(b))
}

// setUp trains the small models the attacks start from.
func setUp() {
	base := append([]string{"train", "-data", bc}, bcFlags...)
	mustRun(append(base, "-kind", "ae", "-hidden", "8", "-latent", "3", "-epochs", "2", "-out", "ae.qm", "-quiet")...)
	mustRun(append(base, "-kind", "vae", "-likelihood", "gaussian", "-hidden", "8", "-latent", "2", "-epochs", "1", "-out", "vae.qm", "-quiet")...)
	mustRun(append(base, "-kind", "gan", "-hidden", "8", "-epochs", "1", "-out", "gan.qm", "-quiet")...)
	mustRun(append(base, "-kind", "ae", "-hidden", "8", "-latent", "3", "-epochs", "3", "-every", "1", "-out", "ck.qm", "-quiet")...)
	if _, err := os.Stat(path("ck.qm.ckpt")); err != nil {
		fatal(fmt.Errorf("setting up: no checkpoint beside ck.qm: %v", err))
	}
}

// lie rewrites metadata of a model file (section key, or fields of
// section key when fields is a map) and seals it again.
func lie(from, to, key string, v any) error {
	f, err := modelfile.Read(path(from), 0)
	if err != nil {
		return err
	}
	if fields, ok := v.(map[string]any); ok {
		var sec map[string]any
		if _, err := f.Section(key, &sec); err != nil {
			return err
		}
		for k, x := range fields {
			sec[k] = x
		}
		v = sec
	}
	if err := f.SetSection(key, v); err != nil {
		return err
	}
	var b bytes.Buffer
	if err := modelfile.Encode(&b, f); err != nil {
		return err
	}
	return os.WriteFile(path(to), b.Bytes(), 0o644)
}

func widths(n, w int) []int {
	s := make([]int, n)
	for i := range s {
		s[i] = w
	}
	return s
}

// 1. Model files whose sealed metadata lies.
func lyingFiles() {
	fmt.Println("-- model files whose sealed metadata lies (inspect, score)")
	cases := []struct {
		name, from, key string
		v               any
	}{
		{"huge latent width", "ae.qm", "config", map[string]any{"Latent": 1 << 40}},
		{"huge input width", "ae.qm", "config", map[string]any{"Inputs": 1 << 40}},
		{"huge hidden width", "vae.qm", "config", map[string]any{"Hidden": []int{1 << 40}}},
		{"huge class count", "ae.qm", "config", map[string]any{"Classes": 1 << 40}},
		{"100,000 hidden layers", "ae.qm", "config", map[string]any{"Hidden": widths(100000, 1<<20)}},
		{"huge noise width", "gan.qm", "config", map[string]any{"Noise": 1 << 40}},
		{"huge pack", "gan.qm", "config", map[string]any{"Pack": 1 << 40}},
		{"image shape", "ae.qm", "image", []int{1 << 30, 1 << 30, 1 << 30}},
		{"column names", "ae.qm", "columns", []string{"a", "b"}},
	}
	for i, c := range cases {
		name := fmt.Sprintf("lie%d.qm", i)
		if err := lie(c.from, name, c.key, c.v); err != nil {
			report(c.name, fmt.Errorf("making the file: %v", err))
			continue
		}
		err := refused(run(nil, "inspect", name), name, 200)
		if err == nil {
			err = refused(run(nil, append([]string{"score", "-model", name, "-data", bc, "-out", "lie.csv"}, bcFlags...)...), name, 200)
		}
		report(c.name, err)
	}
	// the optimiser state's slot count
	f, err := modelfile.Read(path("ck.qm.ckpt"), 0)
	if err == nil {
		var sec map[string]json.RawMessage
		if _, err = f.Section("checkpoint", &sec); err == nil {
			var opts map[string]map[string]any
			if err = json.Unmarshal(sec["optimizers"], &opts); err == nil {
				for _, o := range opts {
					o["slots"] = 1 << 40
				}
				sec["optimizers"], _ = json.Marshal(opts)
				if err = f.SetSection("checkpoint", sec); err == nil {
					err = modelfile.Write(path("slots.ckpt"), f)
				}
			}
		}
	}
	if err == nil {
		err = refused(run(nil, "train", "-resume", "slots.ckpt", "-out", "slots.qm", "-data", bc), "slots", 200)
	}
	report("huge optimiser slot count (train -resume)", err)
}

// freePort finds a loopback port nobody listens on.
func freePort() string {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		fatal(err)
	}
	defer ln.Close()
	return ln.Addr().String()
}

type server struct {
	cmd  *exec.Cmd
	addr string
	done chan error
	log  bytes.Buffer
}

func startServer(model string, extra ...string) *server {
	s := &server{addr: freePort(), done: make(chan error, 1)}
	s.cmd = exec.Command(*bin, append([]string{"serve", "-model", model, "-addr", s.addr}, extra...)...)
	s.cmd.Dir = work
	s.cmd.Env = append(os.Environ(), "QUERN_ATTACK_TOKEN=tok")
	s.cmd.Stderr = &s.log
	if err := s.cmd.Start(); err != nil {
		fatal(err)
	}
	go func() { s.done <- s.cmd.Wait() }()
	return s
}

func (s *server) alive() bool {
	select {
	case err := <-s.done:
		s.done <- err
		return false
	default:
		return true
	}
}

func (s *server) get(p string, auth string) (int, string, error) {
	req, _ := http.NewRequest("GET", "http://"+s.addr+p, nil)
	if auth != "" {
		req.Header.Set("Authorization", auth)
	}
	return do(http.DefaultClient, req)
}

func (s *server) post(p, body, auth string) (int, string, error) {
	req, _ := http.NewRequest("POST", "http://"+s.addr+p, strings.NewReader(body))
	if auth != "" {
		req.Header.Set("Authorization", auth)
	}
	return do(http.DefaultClient, req)
}

func do(c *http.Client, req *http.Request) (int, string, error) {
	resp, err := c.Do(req)
	if err != nil {
		return 0, "", err
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, string(b), nil
}

// ready waits for /readyz to answer 200.
func (s *server) ready() error {
	for range 200 {
		if code, _, err := s.get("/readyz", ""); err == nil && code == 200 {
			return nil
		}
		if !s.alive() {
			return fmt.Errorf("the server died: %.300q", s.log.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
	return errors.New("not ready after 10 s")
}

func (s *server) stop() {
	s.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-s.done:
	case <-time.After(20 * time.Second):
		s.cmd.Process.Kill()
	}
}

// a row of the breast-cancer data, as the server takes it
func bcRow(scale float64) string {
	f, err := os.Open(bc)
	if err != nil {
		fatal(err)
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	sc.Scan()
	sc.Scan()
	cells := strings.Split(sc.Text(), ",")
	cells = cells[:len(cells)-1]
	if scale != 0 {
		cells[0] = fmt.Sprint(scale)
	}
	return `{"rows":[[` + strings.Join(cells, ",") + `]]}`
}

// bcRowAll is a request of one row with every cell v.
func bcRowAll(v float64) string {
	cells := make([]string, 30)
	for i := range cells {
		cells[i] = fmt.Sprint(v)
	}
	return `{"rows":[[` + strings.Join(cells, ",") + `]]}`
}

// 2. The server and bad files; the bearer scheme; stopping under load.
func serverAttacks() {
	fmt.Println("-- the server: bad files at start-up and reload, signals while starting, auth, stopping under load")
	copyFile("ae.qm", "served.qm")
	// SIGHUPs every 2 ms from 80 ms after the start until the server
	// answers, while it loads a 34 MB model. The runtime's and the
	// packages' initialisation come first (about 30 ms here): no Go
	// program can take a signal over before them.
	if _, err := os.Stat(path("wide.qm")); err != nil {
		mustRun(append([]string{"train", "-kind", "ae", "-data", bc, "-hidden", "2048,2048", "-latent", "3", "-epochs", "1", "-out", "wide.qm", "-quiet"}, bcFlags...)...)
	}
	copyFile("wide.qm", "served.qm")
	s := startServer("served.qm", "-token-env", "QUERN_ATTACK_TOKEN")
	time.Sleep(80 * time.Millisecond)
	stopHup := make(chan struct{})
	var hups atomic.Int64
	go func() {
		for {
			select {
			case <-stopHup:
				return
			case <-time.After(2 * time.Millisecond):
				s.cmd.Process.Signal(syscall.SIGHUP)
				hups.Add(1)
			}
		}
	}()
	err := s.ready()
	close(stopHup)
	copyFile("ae.qm", "served.qm")
	if err == nil {
		s.cmd.Process.Signal(syscall.SIGHUP) // back to the small model
	}
	if err == nil {
		time.Sleep(100 * time.Millisecond)
		if !s.alive() {
			err = fmt.Errorf("the server died after %d SIGHUPs", hups.Load())
		}
	}
	report(fmt.Sprintf("SIGHUPs while the server starts (%d sent)", hups.Load()), err)
	if err != nil {
		s.stop()
		return
	}
	good := bcRow(0)
	if err := lie("ae.qm", "evil.qm", "config", map[string]any{"Latent": 1 << 40}); err != nil {
		fatal(err)
	}
	copyFile("evil.qm", "served.qm")
	s.cmd.Process.Signal(syscall.SIGHUP)
	time.Sleep(500 * time.Millisecond)
	code, _, err := s.post("/v1/score", good, "Bearer tok")
	switch {
	case !s.alive():
		err = fmt.Errorf("the server died: %.300q", s.log.String())
	case err == nil && code != 200:
		err = fmt.Errorf("scoring after the refused reload answered %d", code)
	}
	report("a lying model file at SIGHUP", err)
	code, body, err := s.post("/admin/reload", "", "Bearer tok")
	switch {
	case !s.alive():
		err = fmt.Errorf("the server died: %.300q", s.log.String())
	case err == nil && code < 400:
		err = fmt.Errorf("the reload of a lying file answered %d: %.200s", code, body)
	}
	if err == nil {
		if code, _, err = s.post("/v1/score", good, "Bearer tok"); err == nil && code != 200 {
			err = fmt.Errorf("scoring after the refused reload answered %d", code)
		}
	}
	report("a lying model file at /admin/reload", err)
	copyFile("ae.qm", "served.qm")

	err = nil
	for h, want := range map[string]int{"bearer tok": 200, "BEARER tok": 200, "Bearer tok": 200, "Bearer nope": 401, "tok": 401} {
		if code, _, e := s.post("/v1/score", good, h); e != nil || code != want {
			err = fmt.Errorf("Authorization %q: %d (%v), want %d", h, code, e, want)
		}
	}
	report("a lower-case bearer scheme (RFC 7235 2.1)", err)

	code, body, err = s.post("/v1/score", bcRowAll(3.4e38), "Bearer tok")
	if err == nil && code == 200 && !strings.Contains(body, "unscorable") && !strings.Contains(body, `"anomaly":true`) {
		err = fmt.Errorf("a row at the float32 maximum answered 200 as normal: %.300s", body)
	}
	report("a cell near the float32 maximum (server)", err)

	// keep-alive clients posting while the server is told to stop, routed
	// as a load balancer routes: until /readyz (polled every 100 ms) stops
	// answering 200. Every request sent must get an answer.
	var answered, lost atomic.Int64
	var routing atomic.Bool
	routing.Store(true)
	var firstLost atomic.Value
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		c := &http.Client{Timeout: 5 * time.Second}
		for routing.Load() {
			req, _ := http.NewRequest("GET", "http://"+s.addr+"/readyz", nil)
			if code, _, err := do(c, req); err != nil || code != 200 {
				routing.Store(false)
			}
			time.Sleep(100 * time.Millisecond)
		}
	}()
	stopAt := time.Now().Add(time.Second)
	for range 16 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			c := &http.Client{Timeout: 10 * time.Second, Transport: &http.Transport{MaxIdleConnsPerHost: 1}}
			for routing.Load() {
				req, _ := http.NewRequest("POST", "http://"+s.addr+"/v1/score", strings.NewReader(good))
				req.Header.Set("Authorization", "Bearer tok")
				code, _, err := do(c, req)
				if err == nil && code == 200 {
					answered.Add(1)
					continue
				}
				lost.Add(1)
				firstLost.CompareAndSwap(nil, fmt.Sprintf("%d %v", code, err))
			}
		}()
	}
	time.Sleep(time.Until(stopAt))
	s.cmd.Process.Signal(syscall.SIGTERM)
	wg.Wait()
	var exitErr error
	select {
	case exitErr = <-s.done:
	case <-time.After(20 * time.Second):
		s.cmd.Process.Kill()
		exitErr = errors.New("did not stop")
	}
	err = nil
	switch {
	case lost.Load() > 0:
		err = fmt.Errorf("%d of %d requests lost without an answer (first: %v)", lost.Load(), answered.Load()+lost.Load(), firstLost.Load())
	case exitErr != nil:
		err = fmt.Errorf("the server's exit: %v", exitErr)
	case answered.Load() == 0:
		err = errors.New("no request was answered")
	}
	report(fmt.Sprintf("SIGTERM under keep-alive load (%d answered)", answered.Load()), err)

	// a lying file at start-up
	bad := startServer("evil.qm")
	select {
	case <-bad.done:
		msg := strings.TrimSpace(bad.log.String())
		err = nil
		if strings.Contains(msg, "panic") || strings.Contains(msg, "goroutine ") || !strings.Contains(msg, "evil.qm") {
			err = fmt.Errorf("the refusal was not a one-line error naming the file: %.300q", msg)
		}
	case <-time.After(20 * time.Second):
		bad.cmd.Process.Kill()
		err = errors.New("still running after 20 s")
	}
	report("a lying model file at start-up", err)
}

func copyFile(from, to string) {
	b, err := os.ReadFile(path(from))
	if err != nil {
		fatal(err)
	}
	// written beside and renamed, as a deployment would
	if err := os.WriteFile(path(to+".new"), b, 0o644); err != nil {
		fatal(err)
	}
	if err := os.Rename(path(to+".new"), path(to)); err != nil {
		fatal(err)
	}
}

// 3. A checkpoint that names where to write.
func checkpointPaths() {
	fmt.Println("-- checkpoints that name where to write")
	old := filepath.Join(*root, "testdata", "compat", "cli-ae.ckpt")
	f, err := modelfile.Read(old, 0)
	if err != nil {
		report("an old checkpoint's stored output path", err)
		return
	}
	var stored string
	var walk func(v any)
	walk = func(v any) {
		switch x := v.(type) {
		case map[string]any:
			for _, y := range x {
				walk(y)
			}
		case []any:
			for i, y := range x {
				if s, ok := y.(string); ok && s == "-out" && i+1 < len(x) {
					if o, ok := x[i+1].(string); ok {
						stored = o
					}
				}
				walk(y)
			}
		case string:
			if o, ok := strings.CutPrefix(x, "-out="); ok {
				stored = o
			}
		}
	}
	var meta any
	if err := json.Unmarshal(f.Meta, &meta); err != nil {
		report("an old checkpoint's stored output path", err)
		return
	}
	walk(meta)
	if stored == "" {
		report("an old checkpoint's stored output path", errors.New("no output path found in testdata/compat/cli-ae.ckpt"))
		return
	}
	// a file of the user's where the checkpoint says to write
	if err := os.MkdirAll(filepath.Dir(stored), 0o755); err != nil {
		report("an old checkpoint's stored output path", err)
		return
	}
	_, statErr := os.Stat(stored)
	created := os.IsNotExist(statErr)
	if created {
		os.WriteFile(stored, []byte("the user's own file\n"), 0o644)
		defer os.Remove(stored)
	}
	before := sum(stored)
	copyIn(old, "old.ckpt")
	r := run(nil, "train", "-resume", "old.ckpt", "-data", bc, "-quiet")
	err = succeeded(r)
	if err == nil && sum(stored) != before {
		err = fmt.Errorf("resuming wrote over %s, the path stored in the checkpoint", stored)
	}
	if err == nil {
		if _, e := os.Stat(path("old")); e != nil {
			err = fmt.Errorf("the resumed model is not beside the checkpoint: %v", e)
		}
	}
	report("an old checkpoint's stored output path", err)
}

func copyIn(from, to string) {
	b, err := os.ReadFile(from)
	if err != nil {
		fatal(err)
	}
	if err := os.WriteFile(path(to), b, 0o644); err != nil {
		fatal(err)
	}
}

// 4. Outputs that would replace inputs; outputs found unwritable late.
func outputsOverInputs() {
	fmt.Println("-- outputs that would replace inputs")
	copyIn(bc, "d.csv")
	copyFile("ae.qm", "keep.qm")
	train := append([]string{"train", "-kind", "ae", "-data", "d.csv", "-epochs", "1", "-quiet"}, bcFlags...)
	score := append([]string{"score", "-model", "keep.qm", "-data", "d.csv"}, bcFlags...)
	for _, c := range []struct {
		name  string
		args  []string
		guard string
	}{
		{"train -out DATA", append(train, "-out", "d.csv"), "d.csv"},
		{"train -checkpoint DATA", append(train, "-out", "m.qm", "-every", "1", "-checkpoint", "d.csv"), "d.csv"},
		{"train -out ./DATA (another spelling)", append(train, "-out", "./d.csv"), "d.csv"},
		{"score -out DATA", append(score, "-out", "d.csv"), "d.csv"},
		{"score -out MODEL", append(score, "-out", "keep.qm"), "keep.qm"},
	} {
		before := sum(path(c.guard))
		err := refused(run(nil, c.args...), "", 0)
		if after := sum(path(c.guard)); after != before {
			err = fmt.Errorf("%s changed (exit status aside): %v", c.guard, err)
		}
		report(c.name, err)
	}
	long := append([]string{"train", "-kind", "ae", "-data", bc, "-epochs", "200", "-quiet"}, bcFlags...)
	r := run(nil, append(long, "-out", "/proc/quern-attack/m.qm")...)
	err := refused(r, "-out", 0)
	if err == nil && r.took > 3*time.Second {
		err = fmt.Errorf("the unwritable -out was found after %v: after training, not before", r.took.Round(time.Millisecond))
	}
	report("an unwritable -out (found before training)", err)
	os.Mkdir(path("folder"), 0o755)
	report("-out naming a folder", refused(run(nil, append(long, "-out", "folder")...), "folder", 0))
}

// 5. Values that overflow.
func overflow() {
	fmt.Println("-- values near the float32 maximum")
	b, err := os.ReadFile(bc)
	if err != nil {
		fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(b)), "\n")
	cells := strings.Split(lines[1], ",")
	cells[0] = "3.4e38"
	one := strings.Join(cells, ",")
	for i := range cells[:len(cells)-1] {
		cells[i] = "3.4e38"
	}
	all := strings.Join(cells, ",")
	body := strings.Join([]string{lines[0], lines[2], one, all, lines[3]}, "\n") + "\n"
	os.WriteFile(path("over.csv"), []byte(body), 0o644)
	r := run(nil, append([]string{"score", "-model", "ae.qm", "-data", "over.csv", "-out", "over-scores.csv"}, bcFlags...)...)
	err = succeeded(r)
	if err == nil {
		out, _ := os.ReadFile(path("over-scores.csv"))
		rows := strings.Split(strings.TrimSpace(string(out)), "\n")
		// each row at the maximum is either unscorable, said in its
		// status and counted in the summary, or an anomaly with a finite
		// score; never normal
		switch {
		case len(rows) != 5:
			err = fmt.Errorf("%d lines of scores, want a header and 4", len(rows))
		case strings.Contains(rows[1], "unscorable") || strings.Contains(rows[4], "unscorable"):
			err = fmt.Errorf("a normal row is marked unscorable")
		}
		for _, row := range rows[2:4] {
			f := strings.Split(row, ",")
			switch {
			case err != nil:
			case strings.Contains(row, "unscorable"):
				if !strings.Contains(r.stderr, "unscorable") {
					err = fmt.Errorf("the summary does not count the unscorable row: %q", r.stderr)
				}
			case len(f) < 4 || f[3] != "true" || strings.Contains(strings.ToLower(f[1]), "nan") || strings.Contains(strings.ToLower(f[1]), "inf"):
				err = fmt.Errorf("a row at the float32 maximum is neither unscorable nor a finite anomaly: %q", row)
			}
		}
	}
	report("a cell near the float32 maximum (score)", err)
	// encoding: a refusal that says the code is not finite, or finite codes
	r = run(nil, append([]string{"encode", "-model", "ae.qm", "-data", "over.csv", "-out", "over-codes.csv"}, bcFlags...)...)
	err = refused(r, "not finite", 0)
	if r.code == 0 {
		out, _ := os.ReadFile(path("over-codes.csv"))
		err = nil
		if low := strings.ToLower(string(out)); strings.Contains(low, "nan") || strings.Contains(low, "inf") {
			err = fmt.Errorf("encode wrote non-finite codes: %.300q", out)
		}
	}
	report("a row at the float32 maximum (encode)", err)
}

// 6. Compressed and image bombs.
func bombs() {
	fmt.Println("-- compressed and image bombs")
	// one 1.5 GB line behind 1.5 MB of gzip
	if err := writeGzip(path("line.csv.gz"), []byte("a\n"), 1536<<20, '1'); err != nil {
		fatal(err)
	}
	r := run(nil, "train", "-kind", "ae", "-data", "line.csv.gz", "-out", "bomb.qm")
	report("a gzip CSV holding one 1.5 GB line", refused(r, "line", 400))
	// an idx whose gzip stream expands to 2 GiB
	head := []byte{0, 0, 0x08, 2}
	head = binary.BigEndian.AppendUint32(head, 1<<15)
	head = binary.BigEndian.AppendUint32(head, 1<<16)
	if err := writeGzip(path("big-idx3-ubyte.gz"), head, 2<<30, 0); err != nil {
		fatal(err)
	}
	r = run(nil, "train", "-kind", "ae", "-data", "big-idx3-ubyte.gz", "-out", "bomb.qm")
	report("a 2 MB gzip idx expanding to 2 GiB", refused(r, "limit", 400))
	// a large first image, then 2,000 one-byte .png files
	dir := path("pngs")
	os.Mkdir(dir, 0o755)
	var b bytes.Buffer
	if err := png.Encode(&b, image.NewGray(image.Rect(0, 0, 4096, 4096))); err != nil {
		fatal(err)
	}
	os.WriteFile(filepath.Join(dir, "0000.png"), b.Bytes(), 0o644)
	for i := 1; i <= 2000; i++ {
		os.WriteFile(filepath.Join(dir, fmt.Sprintf("%04d.png", i)), []byte{1}, 0o644)
	}
	r = run(nil, "train", "-kind", "ae", "-data", "pngs", "-out", "bomb.qm")
	report("a 4096x4096 PNG and 2,000 one-byte .png files", refused(r, "limit", 400))
}

// writeGzip writes head then n bytes of fill, gzip-compressed.
func writeGzip(p string, head []byte, n int64, fill byte) error {
	f, err := os.Create(p)
	if err != nil {
		return err
	}
	defer f.Close()
	w, err := gzip.NewWriterLevel(f, gzip.BestCompression)
	if err != nil {
		return err
	}
	w.Write(head)
	chunk := bytes.Repeat([]byte{fill}, 1<<20)
	for n > 0 {
		k := min(n, int64(len(chunk)))
		if _, err := w.Write(chunk[:k]); err != nil {
			return err
		}
		n -= k
	}
	return w.Close()
}

// 7. The smaller ones.
func smaller() {
	fmt.Println("-- the smaller ones")
	base := append([]string{"train", "-kind", "ae", "-data", bc, "-hidden", "8", "-latent", "3", "-quiet"}, bcFlags...)
	// a save killed part-way leaves a temporary file; once stale it goes
	r := run([]string{"QUERN_TEST_CRASH_IN_SAVE=2"}, append(base, "-epochs", "3", "-every", "1", "-out", "crash.qm")...)
	var err error
	left, _ := filepath.Glob(path(".crash.qm.ckpt.tmp-*"))
	switch {
	case r.code != 3:
		err = fmt.Errorf("the crash hook did not fire (exit %d: %.200q)", r.code, r.stderr)
	case len(left) == 0:
		err = errors.New("the killed save left no temporary file to clean up (the attack did not take place)")
	default:
		long := time.Now().Add(-time.Hour)
		for _, p := range left {
			os.Chtimes(p, long, long)
		}
		err = succeeded(run(nil, "train", "-resume", "crash.qm.ckpt", "-quiet"))
		if now, _ := filepath.Glob(path(".crash.qm.ckpt.tmp-*")); err == nil && len(now) > 0 {
			err = fmt.Errorf("%d temporary file(s) of the killed save are still there", len(now))
		}
	}
	report("the leftover of a save killed part-way", err)

	// saving over a 0644 model file keeps 0644; a new file is 0644
	copyFile("ae.qm", "mode.qm")
	os.Chmod(path("mode.qm"), 0o644)
	err = succeeded(run(nil, append(base, "-epochs", "1", "-out", "mode.qm")...))
	if err == nil {
		for _, p := range []string{"mode.qm", "ae.qm"} {
			if st, e := os.Stat(path(p)); e != nil || st.Mode().Perm() != 0o644 {
				err = fmt.Errorf("%s has mode %v, want 0644", p, st.Mode().Perm())
			}
		}
	}
	report("the permissions of a model file saved over", err)

	// a UTF-8 byte-order mark before the header
	var b strings.Builder
	b.WriteString("\ufeffspeed,load\n")
	for i := range 40 {
		fmt.Fprintf(&b, "%d,%d\n", i, i%7)
	}
	os.WriteFile(path("bom.csv"), []byte(b.String()), 0o644)
	err = succeeded(run(nil, "train", "-kind", "ae", "-data", "bom.csv", "-columns", "speed,load", "-epochs", "1", "-out", "bom.qm", "-quiet"))
	if err == nil {
		r := run(nil, "inspect", "bom.qm")
		if !strings.Contains(r.stdout, "speed") || strings.Contains(r.stdout, "\ufeff") {
			err = fmt.Errorf("the column names are not clean: %.300q", r.stdout)
		}
	}
	report("a byte-order mark before the first column's name", err)
}
