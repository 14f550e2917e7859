package daemon

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"sync"
	"syscall"

	"hystd/acq/demo"
	"hystd/acq/engine"
	"hystd/acq/grade"
	"hystd/acq/live"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/drivers/clock"
	"hystd/drivers/link"
)

// RunOptions are the inputs of `hystd run`.
type RunOptions struct {
	ConfigPath string // daemon config: fixtures, store, log
	Fixture    string // fixture name; "" when the config has one fixture
	RecipePath string
	// Specimen, when not "", replaces the fixture's mounted specimen: an id
	// of the config's specimen registry or a specimen file.
	Specimen string
	Operator string    // recorded with the run; may be ""
	Out      io.Writer // progress lines; nil: discarded
	Wiring   Wiring    // Open, Area, Software, Stderr, Signals
}

// RunOnce runs one recipe in the foreground on one fixture of a daemon
// config, with the same engine and store as the daemon, printing progress.
// SIGINT or SIGTERM aborts the run with a safe ramp-down. The error is a
// recipe or config problem, an *engine.Refused, or an *engine.Stop for a
// run that did not finish.
func RunOnce(ctx context.Context, o RunOptions) (record.Run, error) {
	w := o.Wiring
	if w.Stderr == nil {
		w.Stderr = os.Stderr
	}
	if o.Out == nil {
		o.Out = io.Discard
	}
	cfg, err := Load(o.ConfigPath)
	if err != nil {
		return record.Run{}, err
	}
	log := NewLogger(cfg, w.Stderr)
	for _, name := range UnknownEnv(os.Environ(), cfg.Config) {
		log.Warn("environment variable not used by hystd (misspelt override?)", "name", name)
	}
	var lf LoadedFixture
	switch {
	case o.Fixture != "":
		f, ok := cfg.Fixture(o.Fixture)
		if !ok {
			return record.Run{}, fmt.Errorf("%w %q in %s", ErrUnknownFixture, o.Fixture, o.ConfigPath)
		}
		lf = f
	case len(cfg.Fixtures) == 1:
		lf = cfg.Fixtures[0]
	default:
		return record.Run{}, fmt.Errorf("%w: %s drives %s; name one with --fixture", ErrFixtureNeeded, o.ConfigPath, fixtureNames(cfg))
	}
	l, err := link.Acquire("fixture", lf.Name)
	if err != nil {
		return record.Run{}, fmt.Errorf("fixture %s: %w", lf.Name, err)
	}
	defer l.Unlock()
	rc, err := recipe.Load(o.RecipePath)
	if err != nil {
		return record.Run{}, err
	}
	if o.Specimen != "" {
		sp, err := cfg.Registry.Specimen(o.Specimen)
		if err != nil {
			return record.Run{}, fmt.Errorf("--specimen: %w", err)
		}
		lf.Specimen = sp
		if g, err := recipe.GeometryOf(lf.Fixture, sp); err == nil {
			lf.Geometry = g
		} else if lf.Fixture.HFrom == "current" {
			return record.Run{}, &engine.Refused{Err: fmt.Errorf("specimen %s: %w", sp.ID, err)}
		}
	}
	gr, gradeNote := cfg.Registry.GradeOf(lf.Specimen)
	if gradeNote != "" {
		fmt.Fprintln(o.Out, "note:", gradeNote)
	}
	// Refuse before touching any instrument.
	if _, err := recipe.Expand(rc, lf.Fixture, lf.Geometry); err != nil {
		return record.Run{}, &engine.Refused{Err: err}
	}
	st, err := store.Open(ctx, cfg.Config.Store.Path)
	if err != nil {
		return record.Run{}, err
	}
	defer st.Close()
	ReplaySpool(ctx, cfg.Config.SpoolDir, st, log)
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
	rctx, cancel := context.WithCancelCause(context.WithoutCancel(ctx))
	defer cancel(nil)
	go func() {
		select {
		case <-ctx.Done():
			cancel(engine.Abort("cancelled: " + context.Cause(ctx).Error()))
		case <-rctx.Done():
		}
	}()
	sigs := w.Signals
	if sigs == nil {
		c := make(chan os.Signal, 2)
		signal.Notify(c, syscall.SIGINT, syscall.SIGTERM)
		defer signal.Stop(c)
		sigs = c
	}
	go func() {
		select {
		case s := <-sigs:
			cancel(engine.Abort(s.String() + " received"))
		case <-rctx.Done():
		}
	}()
	op, err := w.Open(rctx, lf.Fixture, lf.Specimen, cfg.Calibrations)
	if err != nil {
		// The supply may have been left on (a killed process): halt it
		// alone before reporting.
		if w.Halt != nil {
			text, herr := w.Halt(context.WithoutCancel(ctx), lf.Fixture)
			if herr != nil && text == "" {
				text = "SUPPLY HALT FAILED: " + herr.Error()
			}
			fmt.Fprintln(o.Out, text)
			return record.Run{}, fmt.Errorf("%w; %s", err, text)
		}
		return record.Run{}, err
	}
	defer op.Close()
	p := &printer{out: o.Out}
	plan, err := engine.Prepare(rctx, engine.Setup{Fixture: lf.Fixture, Specimen: lf.Specimen, Recipe: rc, Geometry: lf.Geometry,
		Area: w.Area(lf.Fixture, lf.Specimen), Instruments: op.Instruments, Clock: w.Clock,
		Writer: grade.Writer{Writer: st, Grade: gr, Rule: cfg.Registry.Rule}, Process: op.Process,
		Live: p, Log: log, Software: w.Software, SpoolDir: cfg.Config.SpoolDir, Operator: o.Operator})
	var ref *engine.Refused
	if errors.As(err, &ref) {
		return record.Run{}, err
	}
	var run record.Run
	if err == nil {
		for _, n := range op.Notes {
			plan.Event(rctx, "warn", n)
		}
		if why := useCalibrations(rctx, plan, op, cfg.Config.CalibrationPastDue, w.Clock.Now()); why != "" {
			run = plan.End(rctx, record.Failed, why)
			err = &engine.Stop{State: record.Failed, Reason: run.Reason}
		} else {
			run, err = plan.Execute(rctx)
		}
	}
	fmt.Fprintf(o.Out, "run %s %s", run.ID, run.State)
	if run.Reason != "" {
		fmt.Fprintf(o.Out, ": %s", run.Reason)
	}
	fmt.Fprintf(o.Out, "\nstored in %s\n", st.Path())
	if run.ID != "" {
		if loops, lerr := st.Loops(ctx, run.ID); lerr == nil {
			fmt.Fprintf(o.Out, "specimen %s (%s)\n", lf.Specimen.ID, lf.Specimen.Material)
			demo.PrintFigures(o.Out, loops)
			grade.Print(o.Out, loops)
		}
	}
	return run, err
}

// printer writes one line per step and per tenth of the run.
type printer struct {
	mu    sync.Mutex
	out   io.Writer
	step  int
	tenth int
}

func (p *printer) Publish(e live.Event) {
	p.mu.Lock()
	defer p.mu.Unlock()
	switch e.Kind {
	case live.KindState:
		if e.State == record.Running {
			fmt.Fprintf(p.out, "run %s running\n", e.RunID)
		}
	case live.KindProgress:
		tenth := int(e.Fraction * 10)
		if e.Step != p.step || tenth > p.tenth {
			p.step, p.tenth = e.Step, tenth
			fmt.Fprintf(p.out, "%3.0f %%  step %d/%d %s\n", 100*e.Fraction, e.Step, e.Steps, e.StepName)
		}
	}
}
