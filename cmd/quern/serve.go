package main

import (
	"context"
	"fmt"
	"log/slog"
	"net"
	"os"
	"os/signal"
	"syscall"
	"time"

	"github.com/quernlab/quern/anomaly"
	qmodel "github.com/quernlab/quern/model"
	"github.com/quernlab/quern/serve"
	"github.com/quernlab/quern/watch"
)

// quern serve reloads on SIGHUP. Until its handler is installed a SIGHUP
// would end the process (Go's default), so for the serve command it is
// ignored from the first moment main's package starts; cmdServe then
// takes it over.
func init() {
	if len(os.Args) > 1 && os.Args[1] == "serve" {
		signal.Ignore(syscall.SIGHUP)
	}
}

func cmdServe(e *env, args []string) error {
	fs := newFlags(e, "serve", "-model MODEL | -fleet FOLDER [-addr 127.0.0.1:8417] [flags]")
	model := fs.String("model", "", "model file to serve; reloaded on SIGHUP or POST /admin/reload")
	fleetDir := fs.String("fleet", "", "a fleet's folder (quern train -group) to serve instead of one model: records go to their group's model, or the shared model; SIGHUP or POST /admin/reload opens the files that changed, POST /admin/reload?group=G one member")
	addr := fs.String("addr", "127.0.0.1:8417", "listen address (loopback by default)")
	tokenEnv := fs.String("token-env", "", "name of an environment variable holding a bearer token to require")
	maxBody := fs.Int64("max-body", 1<<20, "largest request body in bytes")
	maxRows := fs.Int("max-rows", 1000, "most rows per request")
	readTO := fs.Duration("read-timeout", 10*time.Second, "read timeout")
	writeTO := fs.Duration("write-timeout", 30*time.Second, "write timeout")
	idleTO := fs.Duration("idle-timeout", 60*time.Second, "idle connection timeout")
	public := fs.Bool("public-without-token", false, "allow a non-loopback -addr without -token-env (anyone who can reach the port can use the model)")
	drain := fs.Duration("drain", 2*time.Second, "on SIGTERM or interrupt, keep answering this long with /readyz at 503 and connections closed after each answer, then stop (0: stop at once)")
	if _, err := parse(e, fs, args, 0); err != nil {
		return err
	}
	if (*model == "") == (*fleetDir == "") {
		return usagef("give -model MODEL or -fleet FOLDER (one of them)")
	}
	token := ""
	if *tokenEnv != "" {
		token = os.Getenv(*tokenEnv)
		if token == "" {
			return usagef("-token-env %s: the variable is empty", *tokenEnv)
		}
	}
	if token == "" && !*public && !watch.Loopback(*addr) {
		return usagef("-addr %s is reachable from other machines and no -token-env is set: give a token, or -public-without-token to serve it open", *addr)
	}
	log := slog.New(slog.NewJSONHandler(e.stderr, nil))
	// the signal handlers come first: a SIGHUP or SIGTERM during start-up
	// is handled (the reload after loading, the stop before serving), never
	// the default action that kills the process
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	hup := make(chan os.Signal, 1)
	signal.Notify(hup, syscall.SIGHUP)
	defer signal.Stop(hup)
	s, err := serve.New(serve.Config{ModelPath: *model, FleetPath: *fleetDir, Token: token, MaxBodyBytes: *maxBody, MaxRows: *maxRows,
		ReadTimeout: *readTO, WriteTimeout: *writeTO, IdleTimeout: *idleTO, DrainDelay: drainDelay(*drain), Logger: log})
	if err != nil {
		return err
	}
	ln, err := net.Listen("tcp", *addr)
	if err != nil {
		return err
	}
	go func() {
		for range hup {
			s.Reload() // logged; a bad file keeps the current model
		}
	}()
	if f := s.Fleet(); f != nil {
		log.Info("serving a fleet", "addr", ln.Addr().String(), "fleet", *fleetDir, "models", f.Len(), "shared", f.Shared() != nil, "group_column", f.Index().GroupColumn, "kind", s.Model().Kind())
	} else {
		log.Info("serving", "addr", ln.Addr().String(), "model", *model, "kind", s.Model().Kind())
	}
	if token == "" && !watch.Loopback(*addr) {
		log.Warn("no bearer token: anyone who can reach this address can use the model", "addr", ln.Addr().String())
	}
	if _, ok := s.Model().Model.(qmodel.Scorer); ok {
		fmt.Fprintln(e.stderr, anomaly.Caution)
	}
	return s.Serve(ctx, ln)
}

// drainDelay maps the -drain flag (0: none) to serve.Config's DrainDelay
// (0: the default, negative: none).
func drainDelay(d time.Duration) time.Duration {
	if d <= 0 {
		return -1
	}
	return d
}
