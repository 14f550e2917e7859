package daemon

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"os/signal"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"syscall"
	"time"

	"hystd/acq/api"
	"hystd/acq/config"
	"hystd/acq/engine"
	"hystd/acq/fixture"
	"hystd/acq/influx"
	"hystd/acq/live"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/buildinfo"
	"hystd/calib/units"
	"hystd/drivers/clock"
	"hystd/drivers/link"
)

// APIParts are what the HTTP API is built over.
type APIParts = api.DaemonParts

// APIFactory builds the HTTP API and review page.
type APIFactory func(APIParts) (http.Handler, error)

// Wiring is what Serve needs from outside this package.
type Wiring struct {
	Open     Opener                                                        // nil: FixtureOpener
	Halt     Halter                                                        // nil: FixtureHalter when Open is nil too
	API      APIFactory                                                    // nil: only /healthz and /metrics
	Area     func(fx config.Fixture, sp config.Specimen) units.SquareMetre // nil: SpecimenArea
	Software string
	Stderr   io.Writer // logs; nil: os.Stderr
	// Listening, when set, is called with the HTTP address once it listens.
	Listening func(addr string)
	// Signals, when set, replaces the process's SIGHUP/SIGTERM/SIGINT (tests).
	Signals <-chan os.Signal
	// Clock is the time of the drivers and the engine; nil: the machine's.
	// A *clock.Sim, shared with a simulated bench in the same process, runs
	// every run in simulated time (one fixture per clock).
	Clock clock.Clock
}

// NewLogger returns the structured logger a config asks for.
func NewLogger(cfg *Loaded, w io.Writer) *slog.Logger {
	var lv slog.Level
	_ = lv.UnmarshalText([]byte(cfg.Config.Log.Level))
	o := &slog.HandlerOptions{Level: lv}
	if cfg.Config.Log.Format == "json" {
		return slog.New(slog.NewJSONHandler(w, o))
	}
	return slog.New(slog.NewTextHandler(w, o))
}

// Serve is `hystd serve`: it loads the config, opens the store, replays
// spooled loops, starts the forwarder, the HTTP server and the daemon, tells
// systemd it is ready, pings the watchdog, reloads on SIGHUP and, on SIGTERM
// or SIGINT or ctx's end, ends every run safely before it returns.
func Serve(ctx context.Context, configPath string, w Wiring) error {
	if w.Stderr == nil {
		w.Stderr = os.Stderr
	}
	cfg, err := Load(configPath)
	if err != nil {
		return err
	}
	cfg.LoadedAt = time.Now()
	log := NewLogger(cfg, w.Stderr)
	bi := buildinfo.Read()
	log.Info("hystd starting", "version", bi.Version, "revision", bi.Revision, "modified", bi.Modified, "go", bi.GoVersion, "software", w.Software)
	warnUnknownEnv(log, cfg.Config)
	locks, err := LockFixtures(cfg)
	if err != nil {
		return err
	}
	defer locks.Unlock()
	st, err := store.Open(ctx, cfg.Config.Store.Path)
	if err != nil {
		return err
	}
	defer st.Close()
	ReplaySpool(ctx, cfg.Config.SpoolDir, st, log)
	RecoverRuns(ctx, cfg, st, st, log)

	w.fillDefaults(log)
	hub := live.NewHub(0)
	d, err := New(cfg, Deps{Open: w.Open, Halt: w.Halt, Writer: st, Live: hub, Log: log, Software: w.Software, Area: w.Area, Clock: w.Clock})
	if err != nil {
		return err
	}
	var fwg sync.WaitGroup
	var f *influx.Forwarder
	fctx, fstop := context.WithCancel(context.WithoutCancel(ctx))
	// The forwarder is stopped and waited for before its client closes:
	// a write under way ends on its context, not on a closed client.
	defer func() {
		fstop()
		fwg.Wait()
		if f != nil {
			f.Close()
		}
	}()
	if ic := cfg.Config.Influx; ic != nil {
		if f, err = startForwarder(fctx, &fwg, *ic, st, d, log); err != nil {
			return fmt.Errorf("%s: influx: %w", configPath, err)
		}
	}
	var h http.Handler
	if w.API != nil {
		h, err = w.API(APIParts{Reader: st, Runner: d, Live: hub, Token: cfg.Token(), Users: func() []api.Credential { return d.Config().Users() }, Metrics: d.metrics.Registry, Outbox: st,
			Version: w.Software, Log: log.With("part", "api")})
		if err != nil {
			d.Stop("the HTTP API could not be built")
			return fmt.Errorf("%s: http: %w", configPath, err)
		}
	}
	// A supply left energised is brought to zero before anything else,
	// then the fixtures take runs.
	d.Start(ctx)
	ln, err := net.Listen("tcp", cfg.Config.HTTP.Addr)
	if err != nil {
		d.Stop("http.addr unusable")
		return fmt.Errorf("%s: http.addr: %w", configPath, err)
	}
	srv := startHTTP(ctx, ln, cfg, d.Handler(h), log)
	if w.Listening != nil {
		w.Listening(ln.Addr().String())
	}
	sigs, stopSignals := notifySignals(w.Signals, 4, syscall.SIGHUP, syscall.SIGTERM, syscall.SIGINT)
	defer stopSignals()
	log.Info("hystd serving", "config", cfg.File, "http", ln.Addr().String(), "store", st.Path(), "fixtures", len(cfg.Fixtures))
	notify(log, "READY=1\nSTATUS=serving "+fmt.Sprint(len(cfg.Fixtures))+" fixture(s)")
	reason := awaitStop(ctx, sigs, d, configPath, log)
	stopRuns(d, cfg, reason, sigs, log)
	sctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 5*time.Second)
	defer cancel()
	_ = srv.Shutdown(sctx)
	log.Info("stopped")
	return nil
}

// fillDefaults puts the machine's clock, the fixture opener and halter and
// the specimen's area where w leaves them nil.
func (w *Wiring) fillDefaults(log *slog.Logger) {
	if w.Clock == nil {
		w.Clock = clock.Real{}
	}
	if w.Open == nil {
		w.Open = FixtureOpenerClock(log, w.Clock)
		if w.Halt == nil {
			w.Halt = FixtureHalter(log, w.Clock)
		}
	}
	if w.Area == nil {
		w.Area = SpecimenArea
	}
}

// warnUnknownEnv logs the HYSTD_* variables no setting reads (UnknownEnv).
func warnUnknownEnv(log *slog.Logger, c Config) {
	for _, name := range UnknownEnv(os.Environ(), c) {
		log.Warn("environment variable not used by hystd (misspelt override?)", "name", name)
	}
}

// startForwarder builds the InfluxDB forwarder over st, registers its
// metrics with d's and runs it until fctx ends (fwg waits for it).
func startForwarder(fctx context.Context, fwg *sync.WaitGroup, ic influx.Config, st *store.Store, d *Daemon, log *slog.Logger) (*influx.Forwarder, error) {
	f, err := influx.New(ic, st, influx.Options{Log: log.With("part", "forwarder")})
	if err != nil {
		return nil, err
	}
	d.metrics.Registry.MustRegister(f.Collectors()...)
	fwg.Add(1)
	go func() {
		defer fwg.Done()
		if err := f.Run(fctx); err != nil && !errors.Is(err, context.Canceled) {
			log.Error("forwarder stopped", "err", err)
		}
	}()
	return f, nil
}

// startHTTP serves h on ln, behind the host guard, until the returned
// server is shut down; it warns when ln is reachable from other machines
// without a token.
func startHTTP(ctx context.Context, ln net.Listener, cfg *Loaded, h http.Handler, log *slog.Logger) *http.Server {
	if !api.IsLoopback(cfg.Config.HTTP.Addr) && !cfg.TokenSet {
		log.Warn("listening on an address other machines reach, without a token (http.open_without_token): every stored run, with raw samples and config snapshots, is readable from the network",
			"http", ln.Addr().String())
	}
	srv := api.NewHTTPServer(context.WithoutCancel(ctx), api.HostGuard(h, ln.Addr().String(), cfg.Config.HTTP.Hosts), api.DefaultHTTPTimeouts)
	go func() {
		if err := srv.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			log.Error("http server stopped", "err", err)
		}
	}()
	return srv
}

// notifySignals returns given when it is not nil (tests), else a channel
// of buf the process's signals which are delivered to, with the function
// that stops their delivery.
func notifySignals(given <-chan os.Signal, buf int, which ...os.Signal) (<-chan os.Signal, func()) {
	if given != nil {
		return given, func() {}
	}
	c := make(chan os.Signal, buf)
	signal.Notify(c, which...)
	return c, func() { signal.Stop(c) }
}

// awaitStop serves until SIGTERM, SIGINT or ctx's end, reloading the
// config on SIGHUP and pinging the watchdog; it returns why it stopped.
func awaitStop(ctx context.Context, sigs <-chan os.Signal, d *Daemon, configPath string, log *slog.Logger) string {
	var wd <-chan time.Time
	if iv, ok := WatchdogInterval(); ok {
		t := time.NewTicker(iv)
		defer t.Stop()
		wd = t.C
	}
	reason := ""
	for reason == "" {
		select {
		case s := <-sigs:
			if s == syscall.SIGHUP {
				notify(log, "RELOADING=1")
				reload(d, configPath, log)
				notify(log, "READY=1")
				continue
			}
			reason = s.String() + " received"
		case <-ctx.Done():
			reason = "context ended: " + context.Cause(ctx).Error()
		case <-wd:
			notify(log, "WATCHDOG=1")
		}
	}
	return reason
}

// stopRuns ends every run safely for reason, waiting at most StopBound;
// past the bound, or at a second SIGTERM or SIGINT, it abandons the halts
// not yet confirmed (Daemon.Abandon).
func stopRuns(d *Daemon, cfg *Loaded, reason string, sigs <-chan os.Signal, log *slog.Logger) {
	bound := StopBound(cfg)
	log.Warn("stopping: ending every run safely", "reason", reason, "bound", bound)
	notify(log, "STOPPING=1")
	stopped := make(chan struct{})
	go func() { d.Stop(reason); close(stopped) }()
	// The machine's time, whatever clock the runs use: the bound is for
	// whoever waits on the process (systemd, an operator at the terminal).
	tm := time.NewTimer(bound)
	defer tm.Stop()
	for waiting := true; waiting; {
		select {
		case <-stopped:
			waiting = false
		case <-tm.C:
			d.Abandon(fmt.Sprintf("the stop bound (%s) passed", bound))
			waiting = false
		case s := <-sigs:
			if s == syscall.SIGHUP {
				continue
			}
			d.Abandon(s.String() + " received again while stopping")
			waiting = false
		}
	}
}

// StopMargin is the part of StopBound beyond the ramp-downs and the
// halts' own bounds: the runs' last error polls, their records, the HTTP
// server's shutdown.
const StopMargin = 10 * time.Second

// StopBound is how long Serve waits, after SIGTERM or SIGINT (or its
// context's end), for every run's ending and every supply's halt before it
// returns all the same, recording the halts it could not confirm
// (Daemon.Abandon): twice the engine's halt bound for the slowest fixture
// (engine.HaltMargin plus twice its ramp-down from max_current_a, once for
// a run's ending and once for the daemon's own halt of every supply) plus
// StopMargin. A healthy supply's ramp-down always fits; with an
// instrument's port gone the halts fail within seconds
// (profile.HaltReconnectWithin), well before it.
func StopBound(cfg *Loaded) time.Duration {
	var ramp time.Duration
	for _, lf := range cfg.Fixtures {
		ramp = max(ramp, fixture.RampDownTime(lf.Fixture))
	}
	return 2*(engine.HaltMargin+2*ramp) + StopMargin
}

func notify(log *slog.Logger, state string) {
	if _, err := Notify(state); err != nil {
		log.Warn("systemd notify failed", "err", err)
	}
}

// reload loads the config afresh and swaps it in only when it is valid.
func reload(d *Daemon, path string, log *slog.Logger) {
	cfg, err := Load(path)
	if err != nil {
		d.metrics.ReloadFailed()
		log.Error("config reload refused; keeping the config in force", "err", err)
		return
	}
	cfg.LoadedAt = time.Now()
	old := d.Config().Config
	nc := cfg.Config
	var restart []string
	if nc.HTTP.Addr != old.HTTP.Addr {
		restart = append(restart, "http.addr")
	}
	if nc.Store.Path != old.Store.Path {
		restart = append(restart, "store.path")
	}
	if (nc.Influx == nil) != (old.Influx == nil) || (nc.Influx != nil && !reflect.DeepEqual(*nc.Influx, *old.Influx)) {
		restart = append(restart, "influx")
	}
	if nc.Log != old.Log {
		restart = append(restart, "log")
	}
	if nc.HTTP.TokenFile != old.HTTP.TokenFile {
		restart = append(restart, "http.token_file")
	}
	if len(restart) > 0 {
		log.Warn("config reloaded; these settings take effect at the next start", "keys", strings.Join(restart, ", "))
	}
	d.Reload(cfg)
	log.Info("config reloaded", "config", path, "fixtures", len(cfg.Fixtures))
}

// ReplaySpool commits loops spooled by runs whose store was down, removing
// each file once committed. A loop the store already holds (the store
// came back before the spool was replayed, or a previous replay committed
// it and was stopped before removing the file) counts as committed: its
// file is removed too. Files that still fail, or cannot be read, are kept.
func ReplaySpool(ctx context.Context, dir string, w record.Writer, log *slog.Logger) {
	files, _ := filepath.Glob(filepath.Join(dir, "*.gob"))
	for _, f := range files {
		l, err := engine.ReadSpool(f)
		if err == nil {
			err = w.AddLoop(ctx, l)
		}
		switch {
		case errors.Is(err, store.ErrExists):
			log.Info("spooled loop already in the store; spool file removed", "file", f, "run", l.RunID, "loop", l.N)
		case err != nil:
			log.Error("spooled loop not committed; kept", "file", f, "err", err)
			continue
		default:
			log.Info("spooled loop committed", "file", f, "run", l.RunID, "loop", l.N)
		}
		if err := os.Remove(f); err != nil {
			log.Warn("spool file not removed; the next replay will find the loop stored", "file", f, "err", err)
		}
	}
}

// RecoverRuns records the ending of runs a previous daemon left queued or
// running (it was killed, or the power failed): a running one as failed,
// interrupted; a queued one as aborted, never started. The supplies are
// brought to zero by Start.
func RecoverRuns(ctx context.Context, cfg *Loaded, r record.Reader, w record.Writer, log *slog.Logger) {
	now := time.Now()
	for _, lf := range cfg.Fixtures {
		for _, c := range []struct {
			from, to record.State
			reason   string
		}{
			{record.Running, record.Failed, "interrupted: the daemon stopped (killed or power lost) while the run was under way; loops committed before that are kept"},
			{record.Queued, record.Aborted, "the daemon stopped before the run started"},
		} {
			runs, err := r.Runs(ctx, record.RunFilter{Fixture: lf.Name, State: c.from, Limit: 10000})
			if err != nil {
				log.Error("cannot look for interrupted runs", "fixture", lf.Name, "err", err)
				continue
			}
			for _, run := range runs {
				if err := w.SetState(ctx, run.ID, c.to, c.reason, now); err != nil {
					log.Error("cannot record an interrupted run", "run", run.ID, "err", err)
					continue
				}
				_ = w.AddEvent(ctx, record.Event{RunID: run.ID, At: now, Level: "error", Text: "run " + string(c.to) + " at daemon start: " + c.reason})
				log.Warn("run left "+string(c.from)+" by a previous daemon recorded "+string(c.to), "run", run.ID, "fixture", lf.Name)
			}
		}
	}
}

// Locks are the fixture locks a process holds.
type Locks []*link.Lock

// Unlock releases them all.
func (ls Locks) Unlock() {
	for _, l := range ls {
		l.Unlock()
	}
}

// LockFixtures takes the advisory lock of every fixture of cfg (file
// hystd-fixture-NAME.lock in link.LockDir()), so that a second hystd
// process — serve or run, root or not — is refused while this one drives
// them, with this one's PID in the error. Each instrument port is locked
// too, by whoever opens it (drivers/link).
func LockFixtures(cfg *Loaded) (Locks, error) {
	var ls Locks
	for _, lf := range cfg.Fixtures {
		l, err := link.Acquire("fixture", lf.Name)
		if err != nil {
			ls.Unlock()
			return nil, fmt.Errorf("fixture %s: %w", lf.Name, err)
		}
		ls = append(ls, l)
	}
	return ls, nil
}
