package daemon

import (
	"context"
	"errors"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/engine"
	"hystd/acq/engine/enginetest"
	"hystd/acq/record"
)

// fakeBench opens fake instruments on an injected clock; gate, when not
// nil, holds every Open until it is closed.
type fakeBench struct {
	clk   *schedClock
	sup   *enginetest.Supply
	mu    sync.Mutex
	opens int
	gate  chan struct{}
}

func (f *fakeBench) open(ctx context.Context, fx config.Fixture, sp config.Specimen, _ []calrec.Record) (Opened, error) {
	f.mu.Lock()
	f.opens++
	gate := f.gate
	f.mu.Unlock()
	if gate != nil {
		select {
		case <-gate:
		case <-ctx.Done():
			return Opened{}, ctx.Err()
		}
	}
	in := engine.Instruments{Supply: f.sup,
		Integrator: &enginetest.Integrator{Sup: f.sup, K: 1e-3, ZeroAt: f.clk.Now()}}
	return Opened{Instruments: in, Close: func() error { return nil }}, nil
}

// schedClock is the fake clock, except that a wait of more than an hour
// (the next day's schedule) blocks until the context ends.
type schedClock struct{ *enginetest.Clock }

func (c schedClock) SleepUntil(ctx context.Context, t time.Time) error {
	if t.Sub(c.Now()) > time.Hour {
		<-ctx.Done()
		return ctx.Err()
	}
	return c.Clock.SleepUntil(ctx, t)
}

func newFakeDaemon(t *testing.T, body string) (*Daemon, *fakeBench, *enginetest.Writer) {
	t.Helper()
	cfg, err := Load(writeConfig(t, body))
	if err != nil {
		t.Fatal(err)
	}
	clk := &schedClock{enginetest.NewClock()}
	fb := &fakeBench{clk: clk, sup: enginetest.NewSupply(clk.Clock)}
	w := enginetest.NewWriter()
	d, err := New(cfg, Deps{Open: fb.open, Writer: w, Clock: clk, Log: slog.New(slog.DiscardHandler), Software: "test"})
	if err != nil {
		t.Fatal(err)
	}
	return d, fb, w
}

const quickLoop = "kind: recipe\nname: quick\nsteps:\n  - record_loop: {amplitude: 1 A, rate: 4 A/s, points: 50, hold: 200ms}\n"

type ending struct {
	run record.Run
	err error
}

// TestQueueAndAbortQueued: a second run waits for the first; aborted while
// it waits, it is recorded aborted and never opens the instruments.
func TestQueueAndAbortQueued(t *testing.T) {
	d, fb, w := newFakeDaemon(t, "kind: daemon\nstore: {path: x.db}\n"+fixtures)
	d.Start(context.Background()) // opens once to check the supply
	defer d.Stop("test over")
	fb.mu.Lock()
	fb.gate, fb.opens = make(chan struct{}), 0
	fb.mu.Unlock()
	ends := make(chan ending, 2)
	done := func(r record.Run, err error) { ends <- ending{r, err} }
	id1, err := d.SubmitNamed(context.Background(), "aldermoor-ring-2", "one.yaml", []byte(quickLoop), "test", done)
	if err != nil {
		t.Fatal(err)
	}
	id2, err := d.SubmitNamed(context.Background(), "aldermoor-ring-2", "two.yaml", []byte(quickLoop), "test", done)
	if err != nil {
		t.Fatal(err)
	}
	if err := d.Abort(context.Background(), id2); err != nil {
		t.Fatal(err)
	}
	e := <-ends
	if e.run.ID != id2 || e.run.State != record.Aborted || !strings.Contains(e.run.Reason, "before it started") {
		t.Fatalf("first ending %+v", e)
	}
	close(fb.gate)
	e = <-ends
	if e.run.ID != id1 || e.run.State != record.Finished || e.err != nil {
		t.Fatalf("second ending %s %s %q %v", e.run.ID, e.run.State, e.run.Reason, e.err)
	}
	if fb.opens != 1 {
		t.Errorf("instruments opened %d times, want 1 (the aborted run must not open them)", fb.opens)
	}
	if w.Run(id2).State != record.Aborted || w.Run(id1).State != record.Finished || w.LoopCount() != 1 {
		t.Errorf("stored %s / %s, %d loops", w.Run(id1).State, w.Run(id2).State, w.LoopCount())
	}
	if i, on := fb.sup.Truth(); i != 0 || on {
		t.Errorf("supply at %g A, on %v", i, on)
	}
	if err := d.Abort(context.Background(), id1); !errors.Is(err, ErrNotActive) {
		t.Errorf("abort of an ended run: %v", err)
	}
}

// TestSubmitRefusals: bad input changes nothing and says what is wrong.
func TestSubmitRefusals(t *testing.T) {
	d, fb, w := newFakeDaemon(t, "kind: daemon\nstore: {path: x.db}\n"+fixtures)
	d.Start(context.Background())
	defer d.Stop("test over")
	tests := []struct {
		fixture, recipe, want string
	}{
		{"nope", quickLoop, "unknown fixture \"nope\"; this daemon drives aldermoor-ring-2"},
		{"aldermoor-ring-2", "kind: recipe\nname: x\nsteps: []\n", "submitted recipe:3: steps: required"},
		{"aldermoor-ring-2", "kind: recipe\nname: x\nsteps:\n  - record_loop: {amplitude: 12 A, rate: 4 A/s, points: 50}\n", "limits.max_current_a = 10 A"},
	}
	for _, tc := range tests {
		if _, err := d.Submit(context.Background(), tc.fixture, []byte(tc.recipe)); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("Submit(%s): %v, want %q", tc.fixture, err, tc.want)
		}
	}
	if len(w.RunList()) != 0 || fb.opens != 1 { // the start-up check only
		t.Errorf("refusals recorded %d runs, opened instruments %d times", len(w.RunList()), fb.opens)
	}
}

// TestReloadAndSchedule: a reload that adds a schedule starts it; the
// scheduled recipe runs on the daemon's clock; a fixture removed by a
// reload takes no new runs.
func TestReloadAndSchedule(t *testing.T) {
	d, _, w := newFakeDaemon(t, "kind: daemon\nstore: {path: x.db}\n"+fixtures)
	d.Start(context.Background())
	defer d.Stop("test over")
	dir := filepath.Dir(d.Config().File)
	if err := os.WriteFile(filepath.Join(dir, "morning.yaml"), []byte(quickLoop), 0o644); err != nil {
		t.Fatal(err)
	}
	at := d.deps.Clock.Now().Add(30 * time.Minute) // schedules are read in the clock's zone
	body := "kind: daemon\nstore: {path: x.db}\nfixtures:\n  - fixture: fixture-ring-bench.yaml\n    specimen: specimen-ring-r17.yaml\n" +
		"    schedule:\n      - {at: \"" + at.Format("15:04") + "\", recipe: morning.yaml}\n"
	if err := os.WriteFile(d.Config().File, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := Load(d.Config().File)
	if err != nil {
		t.Fatal(err)
	}
	d.Reload(cfg)
	waitFor(t, "the scheduled run", 10*time.Second, func() bool {
		for _, r := range w.RunList() {
			if r.Recipe == "quick" && r.State == record.Finished {
				return true
			}
		}
		return false
	})
	empty, err := Load(writeConfig(t, "kind: daemon\nstore: {path: x.db}\nfixtures:\n  - {fixture: other.yaml, specimen: specimen-ring-r17.yaml}\n"))
	if err == nil {
		d.Reload(empty)
		t.Fatal("a config naming a missing fixture file loaded")
	}
	if _, err := d.Submit(context.Background(), "aldermoor-ring-2", []byte(quickLoop)); err != nil {
		t.Errorf("after a refused reload the fixture no longer takes runs: %v", err)
	}
}

// TestTwoFixtures: one daemon drives two fixtures, each with its own queue
// and instruments; runs on different fixtures proceed independently.
func TestTwoFixtures(t *testing.T) {
	p := writeConfig(t, "kind: daemon\nstore: {path: x.db}\nfixtures:\n"+
		"  - {fixture: fixture-ring-bench.yaml, specimen: specimen-ring-r17.yaml}\n"+
		"  - {fixture: second.yaml, specimen: specimen-ring-r17.yaml}\n")
	dir := filepath.Dir(p)
	b, err := os.ReadFile(filepath.Join(dir, "fixture-ring-bench.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	b = []byte(strings.Replace(string(b), "name: aldermoor-ring-2", "name: aldermoor-ring-3", 1))
	if err := os.WriteFile(filepath.Join(dir, "second.yaml"), b, 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := Load(p)
	if err != nil {
		t.Fatal(err)
	}
	clk := &schedClock{enginetest.NewClock()}
	var mu sync.Mutex
	sups := map[string]*enginetest.Supply{}
	open := func(ctx context.Context, fx config.Fixture, sp config.Specimen, _ []calrec.Record) (Opened, error) {
		mu.Lock()
		defer mu.Unlock()
		s := sups[fx.Name]
		if s == nil {
			s = enginetest.NewSupply(clk.Clock)
			sups[fx.Name] = s
		}
		return Opened{Instruments: engine.Instruments{Supply: s, Integrator: &enginetest.Integrator{Sup: s, K: 1e-3, ZeroAt: clk.Now()}}}, nil
	}
	w := enginetest.NewWriter()
	d, err := New(cfg, Deps{Open: open, Writer: w, Clock: clk, Log: slog.New(slog.DiscardHandler)})
	if err != nil {
		t.Fatal(err)
	}
	d.Start(context.Background())
	defer d.Stop("test over")
	ends := make(chan ending, 2)
	for _, fx := range []string{"aldermoor-ring-2", "aldermoor-ring-3"} {
		if _, err := d.SubmitNamed(context.Background(), fx, "q.yaml", []byte(quickLoop), "test", func(r record.Run, err error) { ends <- ending{r, err} }); err != nil {
			t.Fatal(err)
		}
	}
	seen := map[string]bool{}
	for range 2 {
		e := <-ends
		if e.run.State != record.Finished {
			t.Errorf("%s on %s: %s %q", e.run.ID, e.run.Fixture, e.run.State, e.run.Reason)
		}
		seen[e.run.Fixture] = true
	}
	if !seen["aldermoor-ring-2"] || !seen["aldermoor-ring-3"] || len(d.Status()) != 2 {
		t.Errorf("fixtures seen %v, status %+v", seen, d.Status())
	}
	for name, s := range sups {
		if i, on := s.Truth(); i != 0 || on || s.Halts == 0 {
			t.Errorf("%s: supply at %g A, on %v, %d halts", name, i, on, s.Halts)
		}
	}
}

// TestSubmitWithoutFixtureName: with one fixture an empty name means that
// fixture; with two the submission is refused naming both, and nothing is
// queued or recorded.
func TestSubmitWithoutFixtureName(t *testing.T) {
	d, _, w := newFakeDaemon(t, "kind: daemon\nstore: {path: x.db}\n"+fixtures)
	d.Start(context.Background())
	defer d.Stop("test over")
	ends := make(chan ending, 1)
	id, err := d.SubmitNamed(context.Background(), "", "q.yaml", []byte(quickLoop), "test", func(r record.Run, err error) { ends <- ending{r, err} })
	if err != nil {
		t.Fatal(err)
	}
	e := <-ends
	if e.run.ID != id || e.run.Fixture != "aldermoor-ring-2" || e.run.State != record.Finished {
		t.Errorf("run %s on %q: %s %q", e.run.ID, e.run.Fixture, e.run.State, e.run.Reason)
	}

	cfg, err := Load(twoFixtureConfig(t))
	if err != nil {
		t.Fatal(err)
	}
	d.Reload(cfg)
	before := len(w.RunList())
	_, err = d.Submit(context.Background(), "", []byte(quickLoop))
	if !errors.Is(err, ErrFixtureNeeded) || !strings.Contains(err.Error(), "aldermoor-ring-2, aldermoor-ring-3") {
		t.Errorf("Submit without a fixture on two fixtures: %v", err)
	}
	if n := len(w.RunList()); n != before {
		t.Errorf("a refused submission recorded %d runs", n-before)
	}
	for _, fs := range d.Status() {
		if fs.Queued != 0 || fs.ActiveRun != "" {
			t.Errorf("fixture %s: %+v after a refused submission", fs.Name, fs)
		}
	}
}

// twoFixtureConfig writes a daemon config driving aldermoor-ring-2 and
// aldermoor-ring-3 and returns its path.
func twoFixtureConfig(t *testing.T) string {
	t.Helper()
	p := writeConfig(t, "kind: daemon\nstore: {path: x.db}\nfixtures:\n"+
		"  - {fixture: fixture-ring-bench.yaml, specimen: specimen-ring-r17.yaml}\n"+
		"  - {fixture: second.yaml, specimen: specimen-ring-r17.yaml}\n")
	b, err := os.ReadFile(filepath.Join(filepath.Dir(p), "fixture-ring-bench.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	b = []byte(strings.Replace(string(b), "name: aldermoor-ring-2", "name: aldermoor-ring-3", 1))
	if err := os.WriteFile(filepath.Join(filepath.Dir(p), "second.yaml"), b, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestRunOnceNeedsFixtureName: `hystd run` on a config with two fixtures
// and no --fixture is refused naming them, before any store or port is
// opened.
func TestRunOnceNeedsFixtureName(t *testing.T) {
	p := twoFixtureConfig(t)
	opened := false
	_, err := RunOnce(context.Background(), RunOptions{ConfigPath: p, RecipePath: "none.yaml",
		Wiring: Wiring{Stderr: io.Discard, Open: func(context.Context, config.Fixture, config.Specimen, []calrec.Record) (Opened, error) {
			opened = true
			return Opened{}, errors.New("not here")
		}}})
	if !errors.Is(err, ErrFixtureNeeded) || !strings.Contains(err.Error(), "aldermoor-ring-2, aldermoor-ring-3; name one with --fixture") {
		t.Errorf("RunOnce: %v", err)
	}
	if _, serr := os.Stat(filepath.Join(filepath.Dir(p), "x.db")); !os.IsNotExist(serr) || opened {
		t.Errorf("a refused run opened the store (%v) or the instruments (%v)", serr, opened)
	}
}

// TestMetricsAtStart: every per-fixture series exists, at zero, before the
// first run; hystd_build_info carries the build's labels.
func TestMetricsAtStart(t *testing.T) {
	d, _, _ := newFakeDaemon(t, "kind: daemon\nstore: {path: x.db}\n"+fixtures)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	d.Start(ctx)
	defer d.Stop("test over")
	mfs, err := d.Metrics().Registry.Gather()
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]string{}
	for _, mf := range mfs {
		for _, m := range mf.GetMetric() {
			var ls []string
			for _, lp := range m.GetLabel() {
				ls = append(ls, lp.GetName()+"="+lp.GetValue())
			}
			seen[mf.GetName()+"{"+strings.Join(ls, ",")+"}"] = m.String()
		}
	}
	fx := d.Config().Fixtures[0].Name
	for _, want := range []string{
		"hystd_runs_queued{fixture=" + fx + "}",
		"hystd_run_active{fixture=" + fx + "}",
		"hystd_runs_ended_total{fixture=" + fx + ",state=finished}",
		"hystd_runs_ended_total{fixture=" + fx + ",state=failed}",
		"hystd_recipes_refused_total{fixture=" + fx + ",source=api}",
		"hystd_watch_files_total{fixture=" + fx + ",outcome=done}",
	} {
		if _, ok := seen[want]; !ok {
			t.Errorf("%s missing at start", want)
		}
	}
	found := false
	for k := range seen {
		if strings.HasPrefix(k, "hystd_build_info{") && strings.Contains(k, "revision=") && strings.Contains(k, "goversion=go") && strings.Contains(k, "software=test") {
			found = true
		}
	}
	if !found {
		t.Error("hystd_build_info lacks revision, goversion or software labels")
	}
}
