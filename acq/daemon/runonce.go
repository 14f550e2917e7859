package daemon

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"sync"
	"syscall"

	"hystd/acq/config"
	"hystd/acq/demo"
	"hystd/acq/engine"
	"hystd/acq/grade"
	"hystd/acq/live"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/acq/store"
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
	warnUnknownEnv(log, cfg.Config)
	lf, err := o.pickFixture(cfg)
	if err != nil {
		return record.Run{}, err
	}
	l, err := link.Acquire("fixture", lf.Name)
	if err != nil {
		return record.Run{}, fmt.Errorf("fixture %s: %w", lf.Name, err)
	}
	defer l.Unlock()
	rc, gr, err := o.loadRecipe(cfg, &lf)
	if err != nil {
		return record.Run{}, err
	}
	st, err := store.Open(ctx, cfg.Config.Store.Path)
	if err != nil {
		return record.Run{}, err
	}
	defer st.Close()
	ReplaySpool(ctx, cfg.Config.SpoolDir, st, log)
	w.fillDefaults(log)
	rctx, cancel := context.WithCancelCause(context.WithoutCancel(ctx))
	defer cancel(nil)
	go func() {
		select {
		case <-ctx.Done():
			cancel(engine.Abort("cancelled: " + context.Cause(ctx).Error()))
		case <-rctx.Done():
		}
	}()
	sigs, stopSignals := notifySignals(w.Signals, 2, syscall.SIGINT, syscall.SIGTERM)
	defer stopSignals()
	go func() {
		select {
		case s := <-sigs:
			cancel(engine.Abort(s.String() + " received"))
		case <-rctx.Done():
		}
	}()
	op, err := openOrHalt(ctx, rctx, w, lf, cfg, o.Out)
	if err != nil {
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
	report(ctx, o.Out, run, st, lf.Specimen)
	return run, err
}

// pickFixture returns the fixture o names, or the config's only one.
func (o RunOptions) pickFixture(cfg *Loaded) (LoadedFixture, error) {
	switch {
	case o.Fixture != "":
		f, ok := cfg.Fixture(o.Fixture)
		if !ok {
			return LoadedFixture{}, fmt.Errorf("%w %q in %s", ErrUnknownFixture, o.Fixture, o.ConfigPath)
		}
		return f, nil
	case len(cfg.Fixtures) == 1:
		return cfg.Fixtures[0], nil
	default:
		return LoadedFixture{}, fmt.Errorf("%w: %s drives %s; name one with --fixture", ErrFixtureNeeded, o.ConfigPath, fixtureNames(cfg))
	}
}

// loadRecipe loads o's recipe, mounts o's specimen on lf when o names one,
// notes the specimen's grade and refuses the recipe, before any instrument
// is touched, when it does not fit the fixture.
func (o RunOptions) loadRecipe(cfg *Loaded, lf *LoadedFixture) (*recipe.Recipe, *grade.Grade, error) {
	rc, err := recipe.Load(o.RecipePath)
	if err != nil {
		return nil, nil, err
	}
	if o.Specimen != "" {
		sp, err := cfg.Registry.Specimen(o.Specimen)
		if err != nil {
			return nil, nil, fmt.Errorf("--specimen: %w", err)
		}
		lf.Specimen = sp
		if g, err := recipe.GeometryOf(lf.Fixture, sp); err == nil {
			lf.Geometry = g
		} else if lf.Fixture.HFrom == "current" {
			return nil, nil, &engine.Refused{Err: fmt.Errorf("specimen %s: %w", sp.ID, err)}
		}
	}
	gr, gradeNote := cfg.Registry.GradeOf(lf.Specimen)
	if gradeNote != "" {
		fmt.Fprintln(o.Out, "note:", gradeNote)
	}
	// Refuse before touching any instrument.
	if _, err := recipe.Expand(rc, lf.Fixture, lf.Geometry); err != nil {
		return nil, nil, &engine.Refused{Err: err}
	}
	return rc, gr, nil
}

// openOrHalt opens lf's instruments; when they do not open, it halts the
// supply alone (it may have been left on by a killed process), prints what
// the halt said and returns the opening's error with it.
func openOrHalt(ctx, rctx context.Context, w Wiring, lf LoadedFixture, cfg *Loaded, out io.Writer) (Opened, error) {
	op, err := w.Open(rctx, lf.Fixture, lf.Specimen, cfg.Calibrations)
	if err != nil {
		// The supply may have been left on (a killed process): halt it
		// alone before reporting.
		if w.Halt != nil {
			text, herr := w.Halt(context.WithoutCancel(ctx), lf.Fixture)
			if herr != nil && text == "" {
				text = "SUPPLY HALT FAILED: " + herr.Error()
			}
			fmt.Fprintln(out, text)
			return Opened{}, fmt.Errorf("%w; %s", err, text)
		}
		return Opened{}, err
	}
	return op, nil
}

// report prints how run ended, where it is stored and, for a run that was
// recorded, its specimen, figures and grading.
func report(ctx context.Context, out io.Writer, run record.Run, st *store.Store, sp config.Specimen) {
	fmt.Fprintf(out, "run %s %s", run.ID, run.State)
	if run.Reason != "" {
		fmt.Fprintf(out, ": %s", run.Reason)
	}
	fmt.Fprintf(out, "\nstored in %s\n", st.Path())
	if run.ID != "" {
		if loops, lerr := st.Loops(ctx, run.ID); lerr == nil {
			fmt.Fprintf(out, "specimen %s (%s)\n", sp.ID, sp.Material)
			demo.PrintFigures(out, loops)
			grade.Print(out, loops)
		}
	}
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
