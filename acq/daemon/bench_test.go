package daemon

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"hystd/acq/config/configtest"
	"hystd/acq/engine"
	"hystd/acq/live"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/configs"
	"hystd/drivers/clock"
	"hystd/drivers/profile"
	"hystd/drivers/sim"
)

// benchDaemon is a daemon served over a simulated bench on real ptys, with a
// real SQLite store, driven as `hystd serve` is.
type benchDaemon struct {
	bench  *sim.Bench
	clock  clock.Clock // the bench's, the drivers' and the engine's time (a *clock.Sim)
	dir    string      // config folder
	watch  string
	db     string
	runner Runner
	hub    *live.Hub
	addr   string
	sigs   chan os.Signal
	done   chan error
	ctx    context.Context
	logs   *syncBuf
	halt   Halter // nil: the daemon's own (FixtureHalter)
	// termOnce guards terminate.
	termOnce sync.Once
}

type syncBuf struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuf) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuf) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// startBench starts the demo bench (with faults added) in simulated time and
// a daemon on it, on the same clock; before, when not nil, is called with
// the bench before the daemon starts.
func startBench(t *testing.T, before func(*benchDaemon), faults ...sim.Fault) *benchDaemon {
	t.Helper()
	bd := benchFiles(t, before, faults...)
	bd.serve(t)
	return bd
}

// benchFiles starts the bench and writes the fixture, specimen and daemon
// config for it, without starting a daemon.
func benchFiles(t *testing.T, before func(*benchDaemon), faults ...sim.Fault) *benchDaemon {
	t.Helper()
	return benchFilesOn(t, clock.NewSim(time.Date(2026, 3, 2, 7, 30, 0, 0, time.UTC)), before, faults...)
}

func benchFilesOn(t *testing.T, clk clock.Clock, before func(*benchDaemon), faults ...sim.Fault) *benchDaemon {
	t.Helper()
	cfg, err := sim.DefaultBench()
	if err != nil {
		t.Fatal(err)
	}
	cfg.Faults = append(cfg.Faults, faults...)
	ctx, cancel := context.WithCancel(context.Background())
	b, err := sim.Start(ctx, cfg, sim.WithClock(clk))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cancel(); b.Close() })
	bd := &benchDaemon{bench: b, clock: clk, dir: t.TempDir(), sigs: make(chan os.Signal, 2), done: make(chan error, 1), logs: &syncBuf{}}
	bd.watch = filepath.Join(bd.dir, "inbox")
	bd.db = filepath.Join(bd.dir, "hystd.db")
	if err := os.Mkdir(bd.watch, 0o755); err != nil {
		t.Fatal(err)
	}
	fx, sp := configtest.RingBytes(t, b.Ports())
	write := func(name string, data []byte) {
		if err := os.WriteFile(filepath.Join(bd.dir, name), data, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	write("fixture.yaml", fx)
	write("specimen.yaml", sp)
	write("daemon.yaml", []byte(fmt.Sprintf(`kind: daemon
http: {addr: "127.0.0.1:0"}
store: {path: %s}
log: {level: info}
fixtures:
  - {fixture: fixture.yaml, specimen: specimen.yaml, watch: inbox, poll: 100ms}
`, bd.db)))
	if before != nil {
		before(bd)
	}
	bd.ctx = ctx
	return bd
}

// terminate sends the daemon one SIGTERM, once: a second one while it
// stops would end the stop at once (Daemon.Abandon).
func (bd *benchDaemon) terminate() {
	bd.termOnce.Do(func() {
		select {
		case bd.sigs <- syscall.SIGTERM:
		default:
		}
	})
}

func (bd *benchDaemon) serve(t *testing.T) {
	t.Helper()
	ctx := bd.ctx
	ready := make(chan struct{})
	var once sync.Once
	go func() {
		bd.done <- Serve(ctx, filepath.Join(bd.dir, "daemon.yaml"), Wiring{
			Software: "test",
			Stderr:   bd.logs,
			Signals:  bd.sigs,
			Clock:    bd.clock,
			Halt:     bd.halt,
			API: func(p APIParts) (http.Handler, error) {
				bd.runner, bd.hub = p.Runner, p.Live
				return nil, nil // acq/api imports this package; cmd wires it
			},
			Listening: func(addr string) { bd.addr = addr; once.Do(func() { close(ready) }) },
		})
	}()
	select {
	case <-ready:
	case err := <-bd.done:
		t.Fatalf("serve: %v\n%s", err, bd.logs)
	case <-time.After(20 * time.Second):
		t.Fatalf("daemon not listening\n%s", bd.logs)
	}
	t.Cleanup(func() {
		bd.terminate()
		select {
		case <-bd.done:
		case <-time.After(30 * time.Second):
			t.Error("daemon did not stop")
		}
		if t.Failed() {
			t.Logf("daemon log:\n%s", bd.logs)
		}
	})
}

// waitFor polls cond (a state of the bench, the files or the logs) until
// it holds; the deadline is real time and generous, only to end a test
// that went wrong.
func waitFor(t *testing.T, what string, d time.Duration, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(d)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out waiting for %s", what)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// assertZero checks the bench's ground truth: no current in the winding and
// the output off, and that the output never went off with current flowing.
func (bd *benchDaemon) assertZero(t *testing.T) {
	t.Helper()
	tr := bd.bench.Truth()
	if math.Abs(float64(tr.I)) > 1e-3 || tr.Output {
		t.Errorf("bench truth after the run: I = %g A, output on = %v", float64(tr.I), tr.Output)
	}
	var was bool
	for _, h := range bd.bench.History() {
		if was && !h.Output && math.Abs(float64(h.I)) > 0.05 {
			t.Errorf("output went off at %s with %g A in the winding", h.T, float64(h.I))
			break
		}
		was = h.Output
	}
}

func (bd *benchDaemon) run(t *testing.T, id string) (record.Run, []record.Loop) {
	t.Helper()
	st, err := store.Open(context.Background(), bd.db)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	r, err := st.Run(context.Background(), id)
	if err != nil {
		t.Fatal(err)
	}
	loops, err := st.Loops(context.Background(), id)
	if err != nil {
		t.Fatal(err)
	}
	return r, loops
}

// shortLoop is about 4 s on the bench: approach, 0.5 s hold, 2 s sweep, 0.5 s hold, return.
const shortLoop = `kind: recipe
name: short-loop
steps:
  - record_loop: {amplitude: 500 A/m, rate: 1 kA/m/s, points: 200, hold: 500ms}
`

// TestWatchedFolderRun: a recipe file dropped into the folder is validated,
// queued, run to a stored run, then moved to done/ with a result file; a bad
// one goes to failed/ with the reason, and a recipe beyond a fixture limit
// is refused naming the step and the limit.
func TestWatchedFolderRun(t *testing.T) {
	bd := startBench(t, nil)
	drop := func(name, body string) {
		tmp := filepath.Join(bd.dir, name+".part")
		if err := os.WriteFile(tmp, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
		if err := os.Rename(tmp, filepath.Join(bd.watch, name)); err != nil {
			t.Fatal(err)
		}
	}
	drop("loop.yaml", shortLoop)
	drop("typo.yaml", "kind: recipe\nname: typo\nsteps:\n  - record_loop: {amplitude: 500, rate: 1 kA/m/s, points: 200}\n")
	drop("big.yaml", "kind: recipe\nname: big\nsteps:\n  - record_loop:\n      amplitude: 20 kA/m\n      rate: 1 kA/m/s\n      points: 200\n")
	result := func(sub, name string) string {
		b, _ := os.ReadFile(filepath.Join(bd.watch, sub, name+".result.yaml"))
		return string(b)
	}
	waitFor(t, "done/loop.result.yaml", 60*time.Second, func() bool { return result(DoneDir, "loop") != "" })
	waitFor(t, "failed/big.result.yaml", 10*time.Second, func() bool { return result(FailedDir, "big") != "" })
	bd.assertZero(t)
	res := result(DoneDir, "loop")
	if !strings.Contains(res, "state: finished") || !strings.Contains(res, "run_id: aldermoor-ring-2-") {
		t.Fatalf("result:\n%s", res)
	}
	// The result file holds the stored figures (and verdicts, when the specimen's grade is known).
	if !strings.Contains(res, "specimen: R17-003") || !strings.Contains(res, "loops:") || !strings.Contains(res, "- name: HcB") ||
		!strings.Contains(res, "unit: A/m") {
		t.Errorf("result without figures:\n%s", res)
	}
	if _, err := os.Stat(filepath.Join(bd.watch, DoneDir, "loop.yaml")); err != nil {
		t.Error("recipe not moved to done/")
	}
	id := strings.TrimSpace(strings.SplitN(strings.SplitN(res, "run_id: ", 2)[1], "\n", 2)[0])
	r, loops := bd.run(t, id)
	if r.State != record.Finished || len(loops) != 1 || len(loops[0].Figures) == 0 {
		t.Fatalf("stored run %s %q with %d loops", r.State, r.Reason, len(loops))
	}
	typo := result(FailedDir, "typo")
	if !strings.Contains(typo, "state: refused") || !strings.Contains(typo, "inbox/typo.yaml:4: steps.0.record_loop") || !strings.Contains(typo, "500 has no unit") {
		t.Errorf("typo result:\n%s", typo)
	}
	big := result(FailedDir, "big")
	if !strings.Contains(big, "inbox/big.yaml:5: steps.0.record_loop.amplitude") || !strings.Contains(big, "step 1 (steps.0.record_loop)") ||
		!strings.Contains(big, "limits.max_current_a = 10 A") {
		t.Errorf("big result:\n%s", big)
	}
}

// TestEndingsOnBench: each ending mid-loop leaves the bench's winding at
// zero current with the output off, and the run recorded with its state and reason.
func TestEndingsOnBench(t *testing.T) {
	tests := []struct {
		name   string
		faults []sim.Fault
		act    func(bd *benchDaemon, id string) // called mid-sweep; nil: wait for the fault
		state  record.State
		reason string
	}{
		{"abort", nil, func(bd *benchDaemon, id string) {
			if err := bd.runner.Abort(context.Background(), id); err != nil {
				panic(err)
			}
		}, record.Aborted, "aborted on request"},
		{"SIGTERM", nil, func(bd *benchDaemon, id string) { bd.terminate() }, record.Aborted, "daemon stopping: terminated received"},
		{"supply trip", []sim.Fault{{Role: "supply", Kind: sim.FaultTrip, AfterCommands: 700}}, nil, record.Failed, "supply tripped"},
		{"integrator port hung up", []sim.Fault{{Role: "integrator", Kind: sim.FaultHangup, AfterCommands: 250}}, nil, record.Failed, "lost communication with the integrator"},
		{"supply port hung up", []sim.Fault{{Role: "supply", Kind: sim.FaultHangup, AfterCommands: 700}}, nil, record.Failed, "lost communication with the supply"},
		{"supply reports an error", []sim.Fault{{Role: "supply", Kind: sim.FaultError, AfterCommands: 700, Code: -222, Message: "Data out of range"}},
			nil, record.Failed, "the supply reported an error"},
		// In simulated time a held reply comes only once the engine sleeps
		// again, so it is lost for the sample (after the real-time bounds,
		// fixture.SimReadTimeout and engine.SimCommTimeout): the ending must
		// still ramp down, time moving although the thermometer's line
		// holds unread retries.
		{"thermometer reply delayed", []sim.Fault{{Role: "thermometer", Kind: sim.FaultDelay, Delay: configs.Duration(2 * time.Second), AfterCommands: 300}},
			nil, record.Failed, "no reply from the thermometer within limits.comm_timeout"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			bd := startBench(t, nil, tc.faults...)
			evs, cancel := bd.hub.Subscribe()
			defer cancel()
			id, err := bd.runner.Submit(context.Background(), "aldermoor-ring-2", []byte(shortLoop))
			if err != nil {
				t.Fatal(err)
			}
			var end live.Event
			samples := 0
			acted := false
			deadline := time.After(60 * time.Second)
		wait:
			for {
				select {
				case e := <-evs:
					if e.RunID != id {
						continue
					}
					if e.Kind == live.KindSample {
						samples++
						if samples == 120 && tc.act != nil && !acted {
							acted = true
							tc.act(bd, id)
						}
					}
					if e.Kind == live.KindState && e.State.Ended() {
						end = e
						break wait
					}
				case <-deadline:
					t.Fatalf("run did not end (%d samples)", samples)
				}
			}
			if tc.act != nil && !acted {
				t.Fatalf("run ended before the action, after %d samples: %s %q", samples, end.State, end.Reason)
			}
			if tc.act == nil && samples < 20 {
				t.Errorf("the fault fired before the sweep: %d samples", samples)
			}
			bd.assertZero(t)
			r, _ := bd.run(t, id)
			t.Logf("stored %s: %s (after %d live samples)", r.State, r.Reason, samples)
			if r.State != tc.state || !strings.Contains(r.Reason, tc.reason) {
				t.Errorf("stored %s %q, want %s containing %q", r.State, r.Reason, tc.state, tc.reason)
			}
		})
	}
}

// TestStartupHaltsEnergisedSupply: a supply left at 2 A with its output on
// (by a program that died) is brought to zero when the daemon starts,
// before anything else.
func TestStartupHaltsEnergisedSupply(t *testing.T) {
	bd := startBench(t, func(bd *benchDaemon) {
		b := bd.bench
		ctx := context.Background()
		sup, err := profile.OpenSupply(ctx, profile.Spec{Port: b.Ports()["supply"], Profile: "sim-supply"}, profile.Options{Now: bd.clock.Now})
		if err != nil {
			t.Fatal(err)
		}
		defer sup.Close()
		if err := sup.SetCurrent(ctx, 2); err != nil {
			t.Fatal(err)
		}
		if err := sup.SetOutput(ctx, true); err != nil {
			t.Fatal(err)
		}
		// The test is the actor until the daemon starts: its sleeps move time.
		for k := 0; math.Abs(float64(b.Truth().I)-2) >= 0.01; k++ {
			if k == 1000 {
				t.Fatalf("the bench is at %g A after 10 s of bench time", float64(b.Truth().I))
			}
			clock.Sleep(ctx, bd.clock, 10*time.Millisecond)
		}
	})
	waitFor(t, "the supply at zero", 10*time.Second, func() bool {
		tr := bd.bench.Truth()
		return math.Abs(float64(tr.I)) < 1e-3 && !tr.Output
	})
	bd.assertZero(t)
	if logs := bd.logs.String(); !strings.Contains(logs, "halting supply: ramping to zero") || !strings.Contains(logs, `"supply at zero, output off (read back`) {
		t.Errorf("no log line says the supply was found on and halted:\n%s", logs)
	}
}

// TestSIGHUP: a bad config file is refused on SIGHUP and the config in force
// stays; a good one is swapped in.
func TestSIGHUP(t *testing.T) {
	bd := startBench(t, nil)
	path := filepath.Join(bd.dir, "daemon.yaml")
	good, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, append(append([]byte{}, good...), "bogus: 1\n"...), 0o644); err != nil {
		t.Fatal(err)
	}
	bd.sigs <- syscall.SIGHUP
	waitFor(t, "the refused reload", 10*time.Second, func() bool { return strings.Contains(bd.logs.String(), "config reload refused") })
	if !strings.Contains(bd.logs.String(), "daemon.yaml:7: bogus: unknown key") {
		t.Errorf("the log does not say why:\n%s", bd.logs)
	}
	id, err := bd.runner.Submit(context.Background(), "aldermoor-ring-2", []byte(shortLoop))
	if err != nil {
		t.Fatalf("the old config no longer works: %v", err)
	}
	if err := bd.runner.Abort(context.Background(), id); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, good, 0o644); err != nil {
		t.Fatal(err)
	}
	bd.sigs <- syscall.SIGHUP
	waitFor(t, "the reload", 10*time.Second, func() bool { return strings.Contains(bd.logs.String(), "msg=\"config reloaded\"") })
}

// TestRunOnce is `hystd run`: one recipe in the foreground to a stored run;
// then SIGINT mid-loop aborts it with the winding ramped down.
func TestRunOnce(t *testing.T) {
	bd := benchFiles(t, nil)
	rp := filepath.Join(bd.dir, "short.yaml")
	if err := os.WriteFile(rp, []byte(shortLoop), 0o644); err != nil {
		t.Fatal(err)
	}
	o := RunOptions{ConfigPath: filepath.Join(bd.dir, "daemon.yaml"), RecipePath: rp, Out: &syncBuf{},
		Wiring: Wiring{Software: "test", Stderr: bd.logs, Signals: make(chan os.Signal), Clock: bd.clock}}
	run, err := RunOnce(context.Background(), o)
	if err != nil || run.State != record.Finished {
		t.Fatalf("run %s %q: %v", run.State, run.Reason, err)
	}
	if out := o.Out.(*syncBuf).String(); !strings.Contains(out, "run "+run.ID+" finished") || !strings.Contains(out, "step 1/2 record (steps.0.record_loop)") {
		t.Errorf("progress:\n%s", out)
	}
	bd.assertZero(t)
	if r, loops := bd.run(t, run.ID); r.State != record.Finished || len(loops) != 1 {
		t.Errorf("stored %s with %d loops", r.State, len(loops))
	}

	sigs := make(chan os.Signal, 1)
	o.Wiring.Signals = sigs
	o.Out = &triggerWriter{trigger: "step 1/2 record", fire: func() { sigs <- syscall.SIGINT }}
	run, err = RunOnce(context.Background(), o)
	var stop *engine.Stop
	if !errors.As(err, &stop) || run.State != record.Aborted || run.Reason != "interrupt received" {
		t.Fatalf("after SIGINT: %s %q, %v", run.State, run.Reason, err)
	}
	bd.assertZero(t)
}

// triggerWriter calls fire once when a written line contains trigger and
// the run is at least 30 % through.
type triggerWriter struct {
	trigger string
	fire    func()
	once    sync.Once
}

func (w *triggerWriter) Write(p []byte) (int, error) {
	line := string(p)
	var pct float64
	if _, err := fmt.Sscanf(strings.TrimSpace(line), "%g %%", &pct); err == nil && pct >= 30 && strings.Contains(line, w.trigger) {
		w.once.Do(w.fire)
	}
	return len(p), nil
}
