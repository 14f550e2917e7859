package daemon

import (
	"context"
	"errors"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"strings"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"hystd/acq/config"
	"hystd/acq/engine"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/calib/units"
	"hystd/drivers/clock"
	"hystd/drivers/instr"
	"hystd/drivers/profile"
	"hystd/drivers/sim"

	"golang.org/x/sys/unix"
)

// energise sets the bench's supply to amps with its output on, as a
// process that was then killed would have left it, and leaves a query
// unanswered-by-anyone on the line: its reply is what the next process
// finds waiting when it opens the port. The daemon, if it serves, is idle:
// the test is the clock's actor meanwhile (its sleeps move bench time).
func energise(t *testing.T, bd *benchDaemon, amps float64) {
	t.Helper()
	b := bd.bench
	ctx := context.Background()
	sup, err := profile.OpenSupply(ctx, profile.Spec{Port: b.Ports()["supply"], Profile: "sim-supply"}, profile.Options{Now: bd.clock.Now,
		Sleep: func(ctx context.Context, d time.Duration) error { return clock.Sleep(ctx, bd.clock, d) }})
	if err != nil {
		t.Fatal(err)
	}
	if err := sup.SetOutput(ctx, true); err != nil {
		t.Fatal(err)
	}
	if err := sup.SetCurrent(ctx, units.Ampere(0.5*amps)); err != nil {
		t.Fatal(err)
	}
	if err := sup.SetCurrent(ctx, units.Ampere(amps)); err != nil {
		t.Fatal(err)
	}
	sup.Close()
	for k := 0; math.Abs(float64(b.Truth().I)-amps) >= 0.01; k++ {
		if k == 1000 {
			t.Fatalf("the bench is at %g A after 10 s of bench time", float64(b.Truth().I))
		}
		clock.Sleep(ctx, bd.clock, 10*time.Millisecond)
	}
	f, err := os.OpenFile(b.Ports()["supply"], os.O_RDWR, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	const stale = "MEAS:CURR?\nSYST:ERR?\n"
	if _, err := f.WriteString(stale); err != nil {
		t.Fatal(err)
	}
	// State, not time: both replies wait on the line, unread ("+7.000000E-01"
	// and "0,\"No error\"", each with its terminator: 26 bytes).
	waitFor(t, "the bench's replies on the line", 10*time.Second, func() bool {
		n, err := unix.IoctlGetInt(int(f.Fd()), unix.TIOCINQ)
		return err == nil && n >= 26
	})
}

// zeroWithin waits for the bench's truth — not the daemon's belief — to
// show no current and the output off.
func zeroWithin(t *testing.T, b *sim.Bench, d time.Duration) {
	t.Helper()
	waitFor(t, "the bench's supply at zero, output off", d, func() bool {
		tr := b.Truth()
		return math.Abs(float64(tr.I)) < 1e-3 && !tr.Output
	})
}

// setPort replaces the port of a role in the bench daemon's fixture file.
func (bd *benchDaemon) setPort(t *testing.T, role, port string) {
	t.Helper()
	p := filepath.Join(bd.dir, "fixture.yaml")
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	old := bd.bench.Ports()[role]
	if !strings.Contains(string(b), old) {
		t.Fatalf("fixture has no port %s for %s", old, role)
	}
	if !strings.Contains(string(b), "port: "+old+",") {
		t.Fatalf("fixture:\n%s", b)
	}
	if err := os.WriteFile(p, []byte(strings.ReplaceAll(string(b), "port: "+old+",", "port: "+port+",")), 0o644); err != nil {
		t.Fatal(err)
	}
}

// TestStartupStaleReplyHalts: a process killed with 0.7 A flowing left
// replies on the supply's line; the next daemon's start-up discards them,
// identifies the supply and ramps it to zero (they used to answer *IDN?,
// the supply was refused as "wrong instrument" and stayed on).
func TestStartupStaleReplyHalts(t *testing.T) {
	bd := benchFiles(t, func(bd *benchDaemon) { energise(t, bd, 0.7) })
	bd.serve(t)
	zeroWithin(t, bd.bench, 100*time.Millisecond) // Serve halts before it listens
	bd.assertZero(t)
	if logs := bd.logs.String(); !strings.Contains(logs, "stale input discarded before identification") || !strings.Contains(logs, "supply at zero, output off (read back") {
		t.Errorf("logs:\n%s", logs)
	}
}

// TestStartupThermometerMissingHalts: the optional thermometer's port is
// gone at start-up; the supply, left energised, is halted all the same.
func TestStartupThermometerMissingHalts(t *testing.T) {
	bd := benchFiles(t, func(bd *benchDaemon) { energise(t, bd, 0.7) })
	bd.setPort(t, "thermometer", "/dev/hystd-test-no-such-port")
	bd.serve(t)
	zeroWithin(t, bd.bench, 100*time.Millisecond)
	bd.assertZero(t)
}

// TestOpenFailureMidQueueHalts: a run whose instruments cannot be opened
// (the thermometer's port is missing) ends failed, and the supply someone
// switched on meanwhile is halted; the run's stored events carry the
// read-back confirmation.
func TestOpenFailureMidQueueHalts(t *testing.T) {
	bd := benchFiles(t, nil)
	bd.setPort(t, "thermometer", "/dev/hystd-test-no-such-port")
	bd.serve(t)
	energise(t, bd, 0.6)
	id, err := bd.runner.Submit(context.Background(), "", []byte(shortLoop))
	if err != nil {
		t.Fatal(err)
	}
	var r record.Run
	waitFor(t, "the run's ending", 30*time.Second, func() bool {
		st, err := store.Open(context.Background(), bd.db)
		if err != nil {
			return false
		}
		defer st.Close()
		r, _ = st.Run(context.Background(), id)
		return r.State == record.Failed
	})
	zeroWithin(t, bd.bench, time.Second)
	bd.assertZero(t)
	if !strings.Contains(r.Reason, "instruments could not be opened") || !strings.Contains(r.Reason, "thermometer") {
		t.Errorf("reason %q", r.Reason)
	}
	st, err := store.Open(context.Background(), bd.db)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	evs, err := st.Events(context.Background(), id)
	if err != nil {
		t.Fatal(err)
	}
	found := false
	for _, e := range evs {
		found = found || strings.HasPrefix(e.Text, "supply at zero, output off (read back")
	}
	if !found {
		t.Errorf("no stored event confirms the halt: %+v", evs)
	}
}

// TestSIGTERMIdleHalts: SIGTERM with no run under way still halts a supply
// that is on (switched on by hand, or by a process killed before).
func TestSIGTERMIdleHalts(t *testing.T) {
	bd := benchFiles(t, nil)
	bd.serve(t)
	energise(t, bd, 0.8)
	bd.terminate()
	select {
	case err := <-bd.done:
		if err != nil {
			t.Fatal(err)
		}
		bd.done <- nil // for the cleanup
	case <-time.After(20 * time.Second):
		t.Fatal("daemon did not stop")
	}
	tr := bd.bench.Truth()
	if math.Abs(float64(tr.I)) > 1e-3 || tr.Output {
		t.Fatalf("after SIGTERM the bench reads %g A, output on = %v", float64(tr.I), tr.Output)
	}
	bd.assertZero(t)
}

// runEnded waits for a run's ending and returns it with its stored events.
func (bd *benchDaemon) runEnded(t *testing.T, id string, d time.Duration) (record.Run, []record.Event) {
	t.Helper()
	var r record.Run
	var evs []record.Event
	waitFor(t, "the run's ending", d, func() bool {
		st, err := store.Open(context.Background(), bd.db)
		if err != nil {
			return false
		}
		defer st.Close()
		r, _ = st.Run(context.Background(), id)
		evs, _ = st.Events(context.Background(), id)
		return r.State != record.Queued && r.State != record.Running && r.State != ""
	})
	return r, evs
}

func hasEvent(evs []record.Event, sub string) bool {
	for _, e := range evs {
		if strings.Contains(e.Text, sub) {
			return true
		}
	}
	return false
}

// TestSpontaneousErrorEndsRun: the field meter pushes an error onto its
// queue by itself in the middle of a run (at 2 s of bench time, mid-sweep
// of shortLoop: the run starts at once, its sweep spans about 1–3 s) (no setting follows it): the
// run's error poll reads it, stores it as an event and, the code being
// "fail" in the profile (the default), ends the run failed after the safe
// ramp-down. Before, such errors were never read and the next open's *CLS
// erased them.
func TestSpontaneousErrorEndsRun(t *testing.T) {
	bd := benchFiles(t, nil, sim.Fault{Role: instr.RoleFieldMeter, Kind: sim.FaultError, Code: -310, Message: "System error;probe temperature", At: benchAt(2 * time.Second)})
	bd.serve(t)
	id, err := bd.runner.Submit(context.Background(), "", []byte(shortLoop))
	if err != nil {
		t.Fatal(err)
	}
	r, evs := bd.runEnded(t, id, 30*time.Second)
	zeroWithin(t, bd.bench, time.Second)
	bd.assertZero(t)
	if r.State != record.Failed || !strings.Contains(r.Reason, `raised error -310 "System error;probe temperature" by itself`) {
		t.Errorf("run %s: %s", r.State, r.Reason)
	}
	if !hasEvent(evs, "-310") || !hasEvent(evs, "supply at zero, output off (read back") {
		t.Errorf("events: %+v", evs)
	}
}

// TestLatchedTripNamed: the supply trips by itself during a run (at 2 s of
// bench time, mid-sweep); that run
// and the next one fail naming a latched trip and what clears it (the next
// one used to fail as "lost communication with the supply").
func TestLatchedTripNamed(t *testing.T) {
	bd := benchFiles(t, nil, sim.Fault{Role: instr.RoleSupply, Kind: sim.FaultTrip, At: benchAt(2 * time.Second)})
	bd.serve(t)
	id, err := bd.runner.Submit(context.Background(), "", []byte(shortLoop))
	if err != nil {
		t.Fatal(err)
	}
	r, _ := bd.runEnded(t, id, 30*time.Second)
	zeroWithin(t, bd.bench, time.Second)
	const latched = "supply tripped (latched)"
	const clears = "send *RST to the supply to clear the trip"
	if r.State != record.Failed || !strings.Contains(r.Reason, latched) || !strings.Contains(r.Reason, clears) {
		t.Errorf("run %s: %s", r.State, r.Reason)
	}
	id2, err := bd.runner.Submit(context.Background(), "", []byte(shortLoop))
	if err != nil {
		t.Fatal(err)
	}
	r2, _ := bd.runEnded(t, id2, 30*time.Second)
	if r2.State != record.Failed || !strings.Contains(r2.Reason, latched) || !strings.Contains(r2.Reason, clears) {
		t.Errorf("next run %s: %s", r2.State, r2.Reason)
	}
	// Not assertZero: the trip itself switched the output off with current
	// flowing (the injected fault); what matters is the state after.
	zeroWithin(t, bd.bench, time.Second)
}

// TestSecondOpenerRefused: while `hystd serve` drives a fixture, `hystd run`
// on the same fixture is refused before it touches an instrument, naming
// the holder's PID; so is opening an instrument's port while a run holds
// it (the port lock).
func TestSecondOpenerRefused(t *testing.T) {
	bd := benchFiles(t, nil)
	bd.serve(t)
	rp := filepath.Join(bd.dir, "loop.yaml")
	if err := os.WriteFile(rp, []byte(shortLoop), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err := RunOnce(context.Background(), RunOptions{ConfigPath: filepath.Join(bd.dir, "daemon.yaml"), RecipePath: rp,
		Wiring: Wiring{Stderr: bd.logs, Signals: make(chan os.Signal)}})
	if err == nil || !strings.Contains(err.Error(), "fixture aldermoor-ring-2 is in use by process") {
		t.Fatalf("second process on the fixture: %v", err)
	}
	sup, err := profile.OpenSupply(context.Background(), profile.Spec{Port: bd.bench.Ports()["supply"], Profile: "sim-supply"}, profile.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer sup.Close()
	_, err = profile.OpenSupply(context.Background(), profile.Spec{Port: bd.bench.Ports()["supply"], Profile: "sim-supply"}, profile.Options{})
	if err == nil || !strings.Contains(err.Error(), "is in use by process") {
		t.Fatalf("second opener of the supply's port: %v", err)
	}
}

// TestSecondSignalEndsStop: a stop whose supply halt hangs (a serial call
// that never returns) is ended by a second SIGTERM: Serve returns at once,
// logging loudly that the supply's halt was not confirmed. (The same
// Abandon ends a stop that outlasts StopBound.)
func TestSecondSignalEndsStop(t *testing.T) {
	bd := benchFiles(t, nil)
	var stopping atomic.Bool
	hang := make(chan struct{})
	t.Cleanup(func() { close(hang) })
	own := FixtureHalter(slog.New(slog.NewTextHandler(bd.logs, nil)), bd.clock)
	bd.halt = func(ctx context.Context, fx config.Fixture) (string, error) {
		if stopping.Load() {
			<-hang
			return "", errors.New("released by the test's end")
		}
		return own(ctx, fx)
	}
	bd.serve(t)
	stopping.Store(true)
	bd.terminate()
	waitFor(t, "the stop under way", 10*time.Second, func() bool { return strings.Contains(bd.logs.String(), "stopping: ending every run safely") })
	bd.sigs <- syscall.SIGTERM
	select {
	case err := <-bd.done:
		if err != nil {
			t.Fatal(err)
		}
		bd.done <- nil // for the cleanup
	case <-time.After(20 * time.Second):
		t.Fatal("a second SIGTERM did not end the stop")
	}
	if logs := bd.logs.String(); !strings.Contains(logs, "SUPPLY HALT NOT CONFIRMED: the daemon exits (terminated received again while stopping)") {
		t.Errorf("no loud line says the halt was not confirmed:\n%s", logs)
	}
}

// TestStopBound: the hard bound covers a run's ramp-down and the daemon's
// own halt from max_current_a at the supply profile's halt slew (20 A/s,
// below the fixture's 50 A/s; 10 A: 0.5 s), each with engine.HaltMargin.
func TestStopBound(t *testing.T) {
	bd := benchFiles(t, nil)
	cfg, err := Load(filepath.Join(bd.dir, "daemon.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if got, want := StopBound(cfg), 2*(engine.HaltMargin+time.Second)+StopMargin; got != want {
		t.Errorf("StopBound = %s, want %s", got, want)
	}
}
