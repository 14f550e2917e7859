// Package daemon is hystd's long-running service: it drives several
// fixtures, one run at a time each, from recipes submitted over the API,
// dropped into a watched folder per fixture, or due on a schedule; it
// reloads its config on SIGHUP (validated before the swap), ends every run
// safely on SIGTERM, tells systemd it is ready and alive, and exposes
// /healthz and Prometheus /metrics.
//
// A Daemon is safe for concurrent use. Runs are executed by acq/engine; the
// instruments, the processing and the HTTP API are injected (see Deps and
// Wiring), so that this package knows sweeps and queues, not ports.
package daemon

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"hystd/acq/api"
	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/engine"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/calib/units"
)

// QueueLength is how many runs may wait per fixture.
const QueueLength = 32

// Errors of Submit and Abort.
// They are the API's (acq/api declares what a runner returns).
var (
	ErrUnknownFixture = api.ErrUnknownFixture
	ErrNotActive      = api.ErrNotActive
	ErrStopping       = api.ErrStopping
	ErrQueueFull      = api.ErrQueueFull
	// ErrFixtureNeeded: Submit was given no fixture name and the daemon
	// drives more than one (or none), so it cannot choose.
	ErrFixtureNeeded = api.ErrFixtureNeeded
)

// Opened is a fixture's instruments opened for one run, with the loop
// processing built for them (nil: the Deps' default, or raw only).
type Opened struct {
	Instruments engine.Instruments
	Process     engine.Processor
	// Close releases the ports; it does not halt (the engine has done that).
	Close func() error
	// Calibrations are the records in force for the instruments opened
	// (nil: none), and CalibrationEvents name each (a warning for one past
	// due) for the run's events.
	Calibrations      *calrec.Used
	CalibrationEvents []calrec.Event
	// Notes say what the open met on the way (an attempt that failed and
	// was tried again): recorded as the run's warn events.
	Notes []string
}

// Opener opens a fixture's instruments for one run with the specimen
// mounted; cals are the config's calibration records, of which it applies
// those for this fixture and the instruments it finds.
type Opener func(ctx context.Context, fx config.Fixture, sp config.Specimen, cals []calrec.Record) (Opened, error)

// Halter brings a fixture's supply to zero current with its output off,
// opening the supply alone, and returns the confirmation as read back
// ("supply at zero, output off (read back …)").
type Halter func(ctx context.Context, fx config.Fixture) (string, error)

// Deps are a Daemon's collaborators.
type Deps struct {
	Open Opener // required
	// Halt, when set, halts a fixture's supply on its own: at start-up,
	// after a run whose instruments could not be opened, and when the
	// daemon stops. nil: start-up halts through Open (as before).
	Halt   Halter
	Writer record.Writer // required
	// Area returns the specimen's cross-section for the live B estimate; nil: none.
	Area     func(fx config.Fixture, sp config.Specimen) units.SquareMetre
	Live     engine.Publisher
	Clock    engine.Clock // nil: engine.RealClock
	Log      *slog.Logger // nil: slog.Default()
	Software string
}

// Runner is what the HTTP API and the command line need of a daemon.
type Runner interface {
	Submit(ctx context.Context, fixture string, recipeYAML []byte) (runID string, err error)
	Abort(ctx context.Context, runID string) error
}

var _ Runner = (*Daemon)(nil)

// Daemon drives the fixtures of one config.
type Daemon struct {
	cfg     atomic.Pointer[Loaded]
	deps    Deps
	log     *slog.Logger
	metrics *Metrics

	ctx    context.Context
	cancel context.CancelCauseFunc
	wg     sync.WaitGroup

	mu       sync.Mutex
	fixtures map[string]*fixtureRunner
	runs     map[string]*job // queued or running, by run id
	stopping bool
}

type fixtureRunner struct {
	name      string
	queue     chan *job
	mounted   string // id of the specimen on the fixture as far as the daemon knows; guarded by Daemon.mu
	active    atomic.Pointer[job]
	stopAside context.CancelFunc // ends the watcher and scheduler
}

type job struct {
	plan    *engine.Plan // Run() only before Execute or after it returned
	id      string
	fixture string
	fx      config.Fixture
	sp      config.Specimen
	source  string
	cals    []calrec.Record // the config's calibration records at submission
	pastDue string          // calibration_past_due at submission
	done    func(record.Run, error)
	// guarded by Daemon.mu
	cancel  context.CancelCauseFunc // set while running
	aborted bool                    // ended while queued
	mount   chan struct{}           // set while waiting for its specimen to be mounted; closed by ConfirmMount
}

// New returns a daemon for cfg; Start begins its work.
func New(cfg *Loaded, deps Deps) (*Daemon, error) {
	if deps.Open == nil || deps.Writer == nil {
		return nil, errors.New("daemon: Deps.Open and Deps.Writer are required")
	}
	if deps.Clock == nil {
		deps.Clock = engine.RealClock{}
	}
	if deps.Log == nil {
		deps.Log = slog.Default()
	}
	d := &Daemon{deps: deps, log: deps.Log, fixtures: map[string]*fixtureRunner{}, runs: map[string]*job{}}
	d.metrics = newMetrics(d, deps.Software)
	d.deps.Live = countingPublisher{deps.Live, d.metrics}
	d.cfg.Store(cfg)
	return d, nil
}

// Config returns the config in force.
func (d *Daemon) Config() *Loaded { return d.cfg.Load() }

// Metrics returns the daemon's Prometheus metrics.
func (d *Daemon) Metrics() *Metrics { return d.metrics }

// Start brings every fixture's supply to zero if it was left on, then starts
// one worker per fixture and the watched folders and schedules. It returns
// at once; Stop ends it all.
func (d *Daemon) Start(ctx context.Context) {
	d.ctx, d.cancel = context.WithCancelCause(context.WithoutCancel(ctx))
	cfg := d.cfg.Load()
	for _, lf := range cfg.Fixtures {
		d.safeAtStart(ctx, lf)
	}
	d.mu.Lock()
	defer d.mu.Unlock()
	for _, lf := range cfg.Fixtures {
		d.startFixture(lf)
	}
}

// safeAtStart brings a fixture's supply to zero before anything else
// happens on that fixture: with Deps.Halt, the supply alone, always (a
// previous process may have been killed with current flowing, and no other
// instrument, missing or not, can prevent it); without, through Open, when
// its output is found on.
func (d *Daemon) safeAtStart(ctx context.Context, lf LoadedFixture) {
	log := d.log.With("fixture", lf.Name)
	if d.deps.Halt != nil {
		d.haltFixture(ctx, lf.Fixture, "start-up")
		return
	}
	op, err := d.deps.Open(ctx, lf.Fixture, lf.Specimen, nil)
	if err != nil {
		log.Error("instruments not reachable at start-up; runs will retry", "err", err)
		return
	}
	if op.Close != nil {
		defer op.Close()
	}
	in := op.Instruments
	st, err := in.Supply.Status(ctx)
	if err != nil {
		log.Error("supply status unreadable at start-up; halting it anyway", "err", err)
	}
	if err != nil || st.OutputOn {
		if st.OutputOn {
			log.Warn("supply found with its output on at start-up: ramping it to zero")
		}
		if _, herr := engine.SafeHalt(ctx, in, lf.Fixture, math.NaN(), log); herr != nil {
			log.Error("supply halt at start-up failed: check the supply by hand before touching the fixture", "err", herr)
		}
	}
}

// haltFixture halts a fixture's supply through Deps.Halt and logs the
// read-back confirmation; it returns the confirmation or the error text.
func (d *Daemon) haltFixture(ctx context.Context, fx config.Fixture, when string) string {
	if d.deps.Halt == nil {
		return ""
	}
	log := d.log.With("fixture", fx.Name, "when", when)
	text, err := d.deps.Halt(context.WithoutCancel(ctx), fx)
	if err != nil {
		if text == "" {
			text = "SUPPLY HALT FAILED: " + err.Error() + " — bring the supply to zero by hand before touching the fixture"
		}
		log.Error(text, "err", err)
		return text
	}
	log.Info(text)
	return text
}

// startFixture starts (or restarts the side tasks of) one fixture; d.mu held.
func (d *Daemon) startFixture(lf LoadedFixture) {
	d.metrics.initFixture(lf.Name)
	fr := d.fixtures[lf.Name]
	if fr == nil {
		fr = &fixtureRunner{name: lf.Name, queue: make(chan *job, QueueLength), mounted: lf.Specimen.ID}
		d.fixtures[lf.Name] = fr
		d.wg.Add(1)
		go func() {
			defer d.wg.Done()
			d.work(fr)
		}()
	}
	if fr.stopAside != nil {
		fr.stopAside()
	}
	actx, cancel := context.WithCancel(d.ctx)
	fr.stopAside = cancel
	if lf.Watch != "" {
		w := &watcher{d: d, fixture: lf.Name, dir: lf.Watch, poll: lf.Poll, log: d.log.With("fixture", lf.Name, "watch", lf.Watch)}
		d.wg.Add(1)
		go func() {
			defer d.wg.Done()
			w.run(actx)
		}()
	}
	if len(lf.Schedule) > 0 {
		d.wg.Add(1)
		go func() {
			defer d.wg.Done()
			d.schedule(actx, lf)
		}()
	}
}

// Reload swaps in a new config. Runs under way keep the setup they started
// with; new submissions use the new one. Fixtures that left the config stop
// taking runs; new ones start.
func (d *Daemon) Reload(cfg *Loaded) {
	old := d.cfg.Swap(cfg)
	d.mu.Lock()
	defer d.mu.Unlock()
	keep := map[string]bool{}
	for _, lf := range cfg.Fixtures {
		keep[lf.Name] = true
		d.startFixture(lf)
	}
	for _, lf := range old.Fixtures {
		if fr := d.fixtures[lf.Name]; fr != nil && !keep[lf.Name] && fr.stopAside != nil {
			fr.stopAside()
			fr.stopAside = nil
			d.log.Info("fixture left the config: it takes no new runs", "fixture", lf.Name)
		}
	}
	d.metrics.reloads.WithLabelValues("ok").Inc()
}

// Submit validates a recipe against a fixture and queues it; the error is a
// *engine.Refused or a configs error naming file, line, key and problem for
// a recipe that cannot run, and nothing is queued then. A fixture of ""
// means the daemon's only fixture; with several, the error wraps
// ErrFixtureNeeded and names them.
func (d *Daemon) Submit(ctx context.Context, fixture string, recipeYAML []byte) (string, error) {
	return d.submit(ctx, fixture, "", "submitted recipe", recipeYAML, "api", nil)
}

// SubmitNamed is Submit with the file name used in error messages, the
// source shown in logs ("api", "watch", "schedule", "cli") and a function
// called once with the run's final record (never called when an error is
// returned).
func (d *Daemon) SubmitNamed(ctx context.Context, fixture, name string, data []byte, source string, done func(record.Run, error)) (string, error) {
	return d.submit(ctx, fixture, "", name, data, source, done)
}

func (d *Daemon) submit(ctx context.Context, fixture, specimen, name string, data []byte, source string, done func(record.Run, error)) (string, error) {
	cfg := d.cfg.Load()
	if fixture == "" {
		if len(cfg.Fixtures) != 1 {
			return "", fmt.Errorf("%w: this daemon drives %s; name one (?fixture=NAME)", ErrFixtureNeeded, fixtureNames(cfg))
		}
		fixture = cfg.Fixtures[0].Name
	}
	lf, ok := cfg.Fixture(fixture)
	d.mu.Lock()
	fr := d.fixtures[fixture]
	stopping := d.stopping || d.ctx == nil
	d.mu.Unlock()
	if ok && fr == nil && !stopping {
		return "", fmt.Errorf("fixture %q: the daemon has not started it yet", fixture)
	}
	if !ok || fr == nil {
		return "", fmt.Errorf("%w %q; this daemon drives %s", ErrUnknownFixture, fixture, fixtureNames(cfg))
	}
	if stopping {
		return "", ErrStopping
	}
	if len(fr.queue) >= cap(fr.queue) {
		return "", fmt.Errorf("fixture %q: %w (%d runs waiting)", fixture, ErrQueueFull, cap(fr.queue))
	}
	r, err := recipe.Parse(name, data)
	if err != nil {
		d.metrics.refused.WithLabelValues(fixture, source).Inc()
		return "", err
	}
	lf, gr, err := d.chooseSpecimen(cfg, lf, specimen, r)
	if err != nil {
		d.metrics.refused.WithLabelValues(fixture, source).Inc()
		return "", err
	}
	s := engine.Setup{Fixture: lf.Fixture, Specimen: lf.Specimen, Recipe: r, Geometry: lf.Geometry,
		Writer: gradeWriter(d.deps.Writer, gr, cfg), Live: d.deps.Live, Clock: d.deps.Clock, Log: d.log.With("source", source),
		Software: d.deps.Software, SpoolDir: cfg.Config.SpoolDir}
	if d.deps.Area != nil {
		s.Area = d.deps.Area(lf.Fixture, lf.Specimen)
	}
	u, byUser := api.UserFrom(ctx)
	if byUser {
		s.Operator = u.Name
	}
	plan, err := engine.Prepare(ctx, s)
	if err != nil {
		d.metrics.refused.WithLabelValues(fixture, source).Inc()
		return "", err
	}
	if byUser {
		plan.Event(ctx, "info", api.ActionText(u, "run started (queued through the API)"))
	}
	if done == nil {
		done = func(record.Run, error) {}
	}
	id := plan.Run().ID
	j := &job{plan: plan, id: id, fixture: fixture, fx: lf.Fixture, sp: lf.Specimen, source: source, done: done,
		cals: cfg.Calibrations, pastDue: cfg.Config.CalibrationPastDue}
	d.mu.Lock()
	d.runs[id] = j
	d.mu.Unlock()
	select {
	case fr.queue <- j:
	default:
		d.mu.Lock()
		delete(d.runs, id)
		d.mu.Unlock()
		plan.End(ctx, record.Aborted, "queue full")
		return "", fmt.Errorf("fixture %q: %w", fixture, ErrQueueFull)
	}
	d.metrics.queued.WithLabelValues(fixture).Inc()
	d.log.Info("run queued", "run", id, "fixture", fixture, "recipe", r.Name, "source", source)
	return id, nil
}

// fixtureNames lists cfg's fixtures, sorted, for error messages.
func fixtureNames(cfg *Loaded) string {
	names := make([]string, 0, len(cfg.Fixtures))
	for _, f := range cfg.Fixtures {
		names = append(names, f.Name)
	}
	if len(names) == 0 {
		return "no fixture"
	}
	sort.Strings(names)
	return strings.Join(names, ", ")
}

// Abort ends a queued or running run: a running one is ramped down and
// recorded aborted; a queued one is recorded aborted without starting.
func (d *Daemon) Abort(ctx context.Context, runID string) error {
	return d.AbortWithReason(ctx, runID, "aborted on request")
}

// AbortWithReason is Abort with the reason recorded.
func (d *Daemon) AbortWithReason(ctx context.Context, runID, reason string) error {
	if u, ok := api.UserFrom(ctx); ok {
		reason += " by " + u.Name
	}
	d.mu.Lock()
	j := d.runs[runID]
	if j == nil {
		d.mu.Unlock()
		return fmt.Errorf("run %s: %w", runID, ErrNotActive)
	}
	if j.cancel != nil {
		j.cancel(engine.Abort(reason))
		d.mu.Unlock()
		d.recordAction(ctx, runID, api.ActionAbort)
		d.log.Info("abort requested", "run", runID, "reason", reason)
		return nil
	}
	j.aborted = true
	delete(d.runs, runID)
	d.mu.Unlock()
	d.recordAction(ctx, runID, api.ActionAbort)
	run := j.plan.End(ctx, record.Aborted, reason+" (before it started)")
	d.metrics.ended.WithLabelValues(j.fixture, string(record.Aborted)).Inc()
	j.done(run, &engine.Stop{State: record.Aborted, Reason: run.Reason})
	return nil
}

// work runs a fixture's queue, one run at a time, until the daemon stops;
// runs still queued then are recorded aborted.
func (d *Daemon) work(fr *fixtureRunner) {
	for {
		select {
		case <-d.ctx.Done():
			for {
				select {
				case j := <-fr.queue:
					d.dropQueued(j, "daemon stopped before the run started: "+causeText(d.ctx))
				default:
					return
				}
			}
		case j := <-fr.queue:
			d.metrics.queued.WithLabelValues(fr.name).Dec()
			d.execute(fr, j)
		}
	}
}

func causeText(ctx context.Context) string {
	var st *engine.Stop
	if c := context.Cause(ctx); errors.As(c, &st) {
		return st.Reason
	}
	return context.Cause(ctx).Error()
}

func (d *Daemon) dropQueued(j *job, reason string) {
	d.mu.Lock()
	skip := j.aborted
	delete(d.runs, j.id)
	d.mu.Unlock()
	if skip {
		return
	}
	run := j.plan.End(d.ctx, record.Aborted, reason)
	d.metrics.ended.WithLabelValues(j.fixture, string(record.Aborted)).Inc()
	j.done(run, &engine.Stop{State: record.Aborted, Reason: reason})
}

func (d *Daemon) execute(fr *fixtureRunner, j *job) {
	id := j.id
	ctx, cancel := context.WithCancelCause(d.ctx)
	defer cancel(nil)
	d.mu.Lock()
	if j.aborted {
		d.mu.Unlock()
		return
	}
	j.cancel = cancel
	d.mu.Unlock()
	fr.active.Store(j)
	d.metrics.active.WithLabelValues(fr.name).Set(1)
	// The run stops being active before anyone is told it ended, so a
	// watcher reacting to the ending sees the fixture free.
	release := sync.OnceFunc(func() {
		fr.active.Store(nil)
		d.metrics.active.WithLabelValues(fr.name).Set(0)
		d.mu.Lock()
		delete(d.runs, id)
		d.mu.Unlock()
	})
	defer release()
	var run record.Run
	var err error
	var op Opened
	oerr := d.awaitMount(ctx, fr, j)
	if oerr == nil {
		op, oerr = d.deps.Open(ctx, j.fx, j.sp, j.cals)
	}
	switch {
	case oerr != nil:
		// The supply may be on (a previous process, a half-done open):
		// halt it alone, and record how that went with the run.
		halted := d.haltFixture(ctx, j.fx, "open failed")
		st, reason := record.Failed, "instruments could not be opened: "+oerr.Error()
		if ctx.Err() != nil {
			st, reason = record.Aborted, causeText(ctx)
		}
		if halted != "" {
			j.plan.Event(ctx, haltLevel(halted), halted)
		}
		run = j.plan.End(ctx, st, reason)
		err = &engine.Stop{State: st, Reason: run.Reason}
	default:
		for _, n := range op.Notes {
			j.plan.Event(ctx, "warn", n)
		}
		if why := useCalibrations(ctx, j.plan, op, j.pastDue, d.deps.Clock.Now()); why != "" {
			run = j.plan.End(ctx, record.Failed, why)
			err = &engine.Stop{State: record.Failed, Reason: run.Reason}
		} else if serr := j.plan.SetInstruments(op.Instruments, op.Process); serr != nil {
			run = j.plan.End(ctx, record.Failed, serr.Error())
			err = serr
		} else {
			run, err = j.plan.Execute(ctx)
		}
		if op.Close != nil {
			if cerr := op.Close(); cerr != nil {
				d.log.Warn("closing instruments", "fixture", fr.name, "err", cerr)
			}
		}
	}
	d.metrics.ended.WithLabelValues(fr.name, string(run.State)).Inc()
	d.log.Info("run ended", "run", id, "fixture", fr.name, "state", run.State, "reason", run.Reason)
	release()
	j.done(run, err)
}

// Stop aborts every run with reason (ramping each supply down), records
// queued runs as aborted, ends the watchers and schedules, and waits for all
// of it. Submissions after Stop are refused.
func (d *Daemon) Stop(reason string) {
	d.mu.Lock()
	d.stopping = true
	d.mu.Unlock()
	if d.cancel == nil {
		return
	}
	d.cancel(engine.Abort("daemon stopping: " + reason))
	d.wg.Wait()
	// Every ending halts: also a fixture that was idle (its supply may have
	// been switched on by hand, or left on by a process killed before this
	// one started).
	for _, lf := range d.cfg.Load().Fixtures {
		d.haltFixture(context.Background(), lf.Fixture, "daemon stop")
	}
}

// Abandon records, for every run still under way, that the daemon is
// exiting before the run's ramp-down was confirmed (why), as an error event
// and the run's failed state, and logs it loudly per fixture. Serve calls it
// when a stop outlasts StopBound or a second SIGTERM/SIGINT insists; the
// process then exits and the kernel closes the ports, leaving the supply as
// it was last commanded.
func (d *Daemon) Abandon(why string) {
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	d.mu.Lock()
	var active []*job
	for _, fr := range d.fixtures {
		if j := fr.active.Load(); j != nil {
			active = append(active, j)
		}
	}
	fixtures := make([]string, 0, len(d.fixtures))
	for name := range d.fixtures {
		fixtures = append(fixtures, name)
	}
	d.mu.Unlock()
	sort.Strings(fixtures)
	text := "SUPPLY HALT NOT CONFIRMED: the daemon exits (" + why + ") before the supply's halt was confirmed — the winding may still carry current; bring the supply to zero by hand before touching the fixture"
	for _, name := range fixtures {
		d.log.Error(text, "fixture", name)
	}
	now := d.deps.Clock.Now()
	for _, j := range active {
		if err := d.deps.Writer.AddEvent(ctx, record.Event{RunID: j.id, At: now, Level: "error", Text: text}); err != nil {
			d.log.Error("the unconfirmed halt could not be recorded with the run", "run", j.id, "err", err)
		}
		if err := d.deps.Writer.SetState(ctx, j.id, record.Failed, text, now); err != nil {
			d.log.Error("the run's ending could not be recorded", "run", j.id, "err", err)
		}
	}
}

// haltLevel is the event level of a halt confirmation.
func haltLevel(text string) string {
	if strings.HasPrefix(text, "supply at zero") {
		return "info"
	}
	return "error"
}

// FixtureStatus is one fixture's state for /healthz.
type FixtureStatus = api.FixtureStatus

// Status lists the fixtures of the config in force.
func (d *Daemon) Status() []FixtureStatus {
	cfg := d.cfg.Load()
	d.mu.Lock()
	defer d.mu.Unlock()
	var out []FixtureStatus
	for _, lf := range cfg.Fixtures {
		fs := FixtureStatus{Name: lf.Name, Watch: lf.Watch}
		if fr := d.fixtures[lf.Name]; fr != nil {
			fs.Queued = len(fr.queue)
			if j := fr.active.Load(); j != nil {
				fs.ActiveRun = j.id
			}
		}
		out = append(out, fs)
	}
	return out
}

// useCalibrations records with the plan's run the calibrations op applies
// (one event each, a warning for one past due at now) and returns, when
// policy is PastDueRefuse and one is past due, why the run must not start
// (nothing has been energised yet); "" lets it run.
func useCalibrations(ctx context.Context, plan *engine.Plan, op Opened, policy string, now time.Time) string {
	for _, e := range op.CalibrationEvents {
		plan.Event(ctx, e.Level, e.Text)
	}
	late := op.Calibrations.PastDue(now)
	if policy != PastDueRefuse || len(late) == 0 {
		return ""
	}
	var names []string
	for _, r := range late {
		names = append(names, fmt.Sprintf("%s (due %s)", r.ID, r.Due))
	}
	return fmt.Sprintf("refused: calibration %s past due, and the daemon config (calibration_past_due: refuse) refuses runs on an expired calibration; renew it or set calibration_past_due: warn", strings.Join(names, ", "))
}

// RecordAction stores, with a run, that the user of ctx (api.UserFrom) did
// action; without a user it does nothing. It is how every mutation through
// the API names who made it (api.ActionRecorder).
func (d *Daemon) RecordAction(ctx context.Context, runID, action string) error {
	u, ok := api.UserFrom(ctx)
	if !ok {
		return nil
	}
	return d.deps.Writer.AddEvent(context.WithoutCancel(ctx), record.Event{RunID: runID, At: d.deps.Clock.Now(), Level: "info", Text: api.ActionText(u, action)})
}

// recordAction is RecordAction with a failure logged.
func (d *Daemon) recordAction(ctx context.Context, runID, action string) {
	if err := d.RecordAction(ctx, runID, action); err != nil {
		d.log.Error("event not stored", "run", runID, "action", action, "err", err)
	}
}
