// Package demo runs the whole job once on the simulated bench: it starts the
// bench on pseudo-terminals, opens its ports through the same serial drivers
// as real instruments, runs the demo recipe on the demo ring, stores the run
// in an SQLite file, writes a plot of each loop and prints the figures.
package demo

import (
	"context"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"
	"time"

	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/engine"
	"hystd/acq/fixture"
	"hystd/acq/grade"
	"hystd/acq/influx"
	"hystd/acq/live"
	"hystd/acq/plot"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/calib/units"
	"hystd/configs"
	"hystd/drivers/clock"
	"hystd/drivers/instr"
	"hystd/drivers/sim"
)

// Sample config files the demo uses, from configs/ (embedded).
const (
	FixtureFile  = "fixture-ring-bench.yaml"
	SpecimenFile = "specimen-ring-r17.yaml"
	RecipeFile   = "recipes/demo-ring.yaml"
	// BufferedRecipeFile is RecipeFile with capture: buffered.
	BufferedRecipeFile = "recipes/demo-ring-buffered.yaml"
	// RampRecipeFile is BufferedRecipeFile with sweep_mode: ramp.
	RampRecipeFile = "recipes/demo-ring-ramp.yaml"
	// CalibrationDir holds the calibration records of the bench's instruments.
	CalibrationDir = "calibrations"
)

// Options configure a demo run.
type Options struct {
	DataDir  string       // store and plots go here; created if missing
	Out      io.Writer    // progress and the figures table; nil: io.Discard
	Log      *slog.Logger // nil: warnings only, to Out
	Software string       // version recorded with the run
	Operator string       // who runs it, recorded with the run; may be ""
	Live     *live.Hub    // optional: also publish live events here
	// Bench replaces the default bench (tests); zero: sim.DefaultBench().
	Bench *sim.Config
	// Store, when set, is used instead of opening DataDir/hystd.db; the
	// caller keeps ownership.
	Store *store.Store
	// Influx, when set, also sends the stored loops to that InfluxDB v2
	// write API and waits (up to InfluxWait, default 1 min) until the server
	// acknowledged them. Loops it could not send stay in the store's outbox.
	Influx     *influx.Config
	InfluxWait time.Duration
	// Clock is the bench's, the drivers' and the engine's time; nil: real
	// time (the sweep takes as long as on a real bench). A *clock.Sim runs
	// the demo in simulated time, as fast as the pseudo-terminals allow.
	Clock clock.Clock
	// Capture is "polled" (default: RecipeFile) or "buffered"
	// (BufferedRecipeFile: the same sweep, flux and field sampled by the
	// instruments on their own clocks).
	Capture string
	// Sweep is "steps" (default) or "ramp" (RampRecipeFile: with capture
	// buffered only, the supply ramping continuously from tip to tip).
	Sweep string
	// lateHost, in tests, wraps the engine's clock (not the bench's): a host
	// that wakes the engine late.
	lateHost func(clock.Clock) clock.Clock
	// instruments, in tests, changes the opened instruments before the
	// engine gets them.
	instruments func(*engine.Instruments)
}

// Result is what a demo run produced.
type Result struct {
	Run   record.Run
	Loops []record.Loop // as read back from the store, with samples
	Plots []string      // SVG files written
	// Truth is the bench's record of the specimen's true state, one entry per
	// physics step, for checking the measurement against the model.
	Truth []sim.Truth
	// Final is the bench's state once the run has ended, its halt included.
	Final sim.Truth
	DB    string // path of the SQLite file
}

// Run runs the demo. Cancelling ctx ends the run safely (the supply is
// ramped down) and returns the error.
func Run(ctx context.Context, o Options) (Result, error) {
	out := o.Out
	if out == nil {
		out = io.Discard
	}
	log := o.Log
	if log == nil {
		log = slog.New(slog.NewTextHandler(out, &slog.HandlerOptions{Level: slog.LevelWarn}))
	}
	fx, sp, rc, err := loadSamples(o.Capture, o.Sweep)
	if err != nil {
		return Result{}, err
	}

	clk := o.Clock
	if clk == nil {
		clk = clock.Real{}
	}
	// The bench outlives a cancelled ctx until Run returns: the run's
	// ending ramps the supply down through it (the deferred Close stops it).
	bench, err := startBench(context.WithoutCancel(ctx), o.Bench, clk, out)
	if err != nil {
		return Result{}, err
	}
	defer bench.Close()
	fx = withPorts(fx, bench.Ports())
	for _, role := range []string{instr.RoleSupply, instr.RoleIntegrator, instr.RoleFieldMeter, instr.RoleThermometer} {
		if in, ok := fx.Instruments[role]; ok {
			fmt.Fprintf(out, "  %-12s %s (profile %s)\n", role, in.Port, in.Profile)
		}
	}

	st := o.Store
	var db string
	if st == nil {
		if err := os.MkdirAll(o.DataDir, 0o755); err != nil {
			return Result{}, err
		}
		db = filepath.Join(o.DataDir, "hystd.db")
		st, err = store.Open(ctx, db)
		if err != nil {
			return Result{}, err
		}
		defer st.Close()
	} else {
		db = st.Path()
	}

	opened, err := fixture.OpenClock(ctx, fx, log, clk)
	if err != nil {
		return Result{}, err
	}
	defer opened.Close()
	if o.instruments != nil {
		o.instruments(&opened.Instruments)
	}
	proc, calEvents, err := processor(opened, fx, sp, clk.Now(), log)
	if err != nil {
		return Result{}, err
	}
	gr, err := specimenGrade(sp)
	if err != nil {
		return Result{}, err
	}
	pub := &progress{out: out, hub: o.Live}
	fmt.Fprintf(out, "running recipe %q on specimen %s (%s)\n", rc.Name, sp.ID, sp.Material)
	plan, err := engine.Prepare(ctx, engine.Setup{
		Fixture:     fx,
		Specimen:    sp,
		Recipe:      rc,
		Instruments: opened.Instruments,
		Writer:      grade.Writer{Writer: st, Grade: gr},
		Process:     proc,
		Live:        pub,
		Log:         log,
		Software:    o.Software,
		Operator:    o.Operator,
		SpoolDir:    o.DataDir,
		Clock:       engineClock(clk, o.lateHost),
	})
	if err != nil {
		return Result{}, err
	}
	for _, e := range calEvents {
		plan.Event(ctx, e.Level, e.Text)
	}
	run, runErr := plan.Execute(ctx)
	res := Result{Run: run, DB: db, Truth: bench.History(), Final: bench.Truth()}
	if err := readBack(ctx, st, &res); err != nil {
		return res, err
	}
	if runErr != nil {
		return res, runErr
	}
	fmt.Fprintf(out, "run %s %s; stored in %s\n", res.Run.ID, res.Run.State, db)
	if len(res.Loops) > 0 {
		p := filepath.Join(filepath.Dir(db), res.Run.ID+".svg")
		if err := writePlot(p, res.Run, res.Loops); err != nil {
			return res, err
		}
		res.Plots = append(res.Plots, p)
		fmt.Fprintf(out, "plot: %s\n", p)
	}
	PrintFigures(out, res.Loops)
	grade.Print(out, res.Loops)
	if o.Influx != nil {
		if err := forward(ctx, o, st, res, out); err != nil {
			return res, err
		}
	}
	return res, nil
}

// startBench starts the simulated bench cfg (nil: sim.DefaultBench) on
// clk's time and says so on out.
func startBench(ctx context.Context, cfg *sim.Config, clk clock.Clock, out io.Writer) (*sim.Bench, error) {
	if cfg == nil {
		c, err := sim.DefaultBench()
		if err != nil {
			return nil, fmt.Errorf("demo bench: %w", err)
		}
		cfg = &c
	}
	pace := "real time"
	if clock.IsSimulated(clk) {
		pace = "simulated time"
	}
	fmt.Fprintf(out, "starting the simulated bench %q on pseudo-terminals (%s)\n", cfg.Name, pace)
	bench, err := sim.Start(ctx, *cfg, sim.WithClock(clk))
	if err != nil {
		return nil, fmt.Errorf("simulated bench: %w", err)
	}
	return bench, nil
}

// processor returns the loop processor of the opened bench with the
// shipped calibration records that apply to its instruments at now, and
// the events that say which were used; the processor's warnings go to log.
func processor(opened *fixture.Opened, fx config.Fixture, sp config.Specimen, now time.Time, log *slog.Logger) (engine.Processor, []calrec.Event, error) {
	// The shipped calibration records (configs/calibrations) apply to the
	// bench's instruments by the identities they gave.
	cals, err := calrec.LoadFS(configs.Samples, CalibrationDir, "configs/"+CalibrationDir)
	if err != nil {
		return nil, nil, err
	}
	used, calEvents, err := opened.Calibrations(cals, fx, now)
	if err != nil {
		return nil, nil, err
	}
	proc, warnings, err := opened.Processor(fx, sp, used)
	if err != nil {
		return nil, nil, err
	}
	for _, w := range warnings {
		log.Warn(w) // a log line: stderr under hystd demo
	}
	return proc, calEvents, nil
}

// specimenGrade is the demo specimen's grade, from the shipped sample
// grades.
func specimenGrade(sp config.Specimen) (*grade.Grade, error) {
	grades, err := grade.LoadFS(configs.Samples, ".", "configs")
	if err != nil {
		return nil, err
	}
	gr, err := grades.Lookup(sp.Grade)
	if err != nil {
		return nil, fmt.Errorf("demo specimen %s: %w", sp.ID, err)
	}
	return gr, nil
}

// readBack reads res.Run and its loops, with samples, back from the store:
// what was committed, whatever the ending.
func readBack(ctx context.Context, st *store.Store, res *Result) error {
	id := res.Run.ID
	if id == "" {
		return nil
	}
	if r, err := st.Run(ctx, id); err == nil {
		res.Run = r
	}
	loops, err := st.Loops(ctx, id)
	if err != nil {
		return err
	}
	for _, l := range loops {
		full, err := st.Loop(ctx, id, l.N)
		if err != nil {
			return err
		}
		res.Loops = append(res.Loops, full)
	}
	return nil
}

// forward sends the stored loops to o.Influx and waits (up to o.InfluxWait)
// until the server acknowledged those of res.Run.
func forward(ctx context.Context, o Options, st *store.Store, res Result, out io.Writer) error {
	db := res.DB
	wait := o.InfluxWait
	if wait <= 0 {
		wait = time.Minute
	}
	dctx, cancel := context.WithTimeout(ctx, wait)
	defer cancel()
	n, err := influx.DeliverAll(dctx, st, *o.Influx)
	if err != nil {
		return &ForwardError{URL: o.Influx.URL, Sent: n, Err: fmt.Errorf("%w (the rest stay in the outbox of %s)", err, db)}
	}
	if q, err := quarantinedOf(ctx, st, res.Run.ID); err != nil {
		return err
	} else if len(q) > 0 || n == 0 && len(res.Loops) > 0 {
		return &ForwardError{URL: o.Influx.URL, Sent: n, Quarantined: q, DB: db}
	}
	fmt.Fprintf(out, "\nsent %d points to %s (bucket %s)\n", n, o.Influx.URL, o.Influx.Bucket)
	return nil
}

func loadSamples(capture, sweep string) (config.Fixture, config.Specimen, *recipe.Recipe, error) {
	recipeFile := RecipeFile
	switch capture {
	case "", recipe.CapturePolled:
	case recipe.CaptureBuffered:
		recipeFile = BufferedRecipeFile
	default:
		return config.Fixture{}, config.Specimen{}, nil, fmt.Errorf("demo: capture %q: want polled or buffered", capture)
	}
	switch sweep {
	case "", recipe.SweepSteps:
	case recipe.SweepRamp:
		if recipeFile != BufferedRecipeFile {
			return config.Fixture{}, config.Specimen{}, nil, fmt.Errorf("demo: sweep ramp needs capture buffered")
		}
		recipeFile = RampRecipeFile
	default:
		return config.Fixture{}, config.Specimen{}, nil, fmt.Errorf("demo: sweep %q: want steps or ramp", sweep)
	}
	read := func(name string) ([]byte, error) { return fs.ReadFile(configs.Samples, name) }
	b, err := read(FixtureFile)
	if err != nil {
		return config.Fixture{}, config.Specimen{}, nil, err
	}
	fx, err := config.ParseFixture("configs/"+FixtureFile, b)
	if err != nil {
		return config.Fixture{}, config.Specimen{}, nil, err
	}
	if b, err = read(SpecimenFile); err != nil {
		return config.Fixture{}, config.Specimen{}, nil, err
	}
	sp, err := config.ParseSpecimen("configs/"+SpecimenFile, b)
	if err != nil {
		return config.Fixture{}, config.Specimen{}, nil, err
	}
	if b, err = read(recipeFile); err != nil {
		return config.Fixture{}, config.Specimen{}, nil, err
	}
	rc, err := recipe.Parse("configs/"+recipeFile, b)
	if err != nil {
		return config.Fixture{}, config.Specimen{}, nil, err
	}
	return fx, sp, rc, nil
}

// withPorts returns fx with each role's port replaced by the bench's.
func withPorts(fx config.Fixture, ports map[string]string) config.Fixture {
	ins := make(map[string]config.Instrument, len(fx.Instruments))
	for role, in := range fx.Instruments {
		if p, ok := ports[role]; ok {
			in.Port, in.USB = p, nil
			ins[role] = in
		}
	}
	fx.Instruments = ins
	return fx
}

func writePlot(path string, run record.Run, loops []record.Loop) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	labels := make([]string, len(loops))
	for i, l := range loops {
		labels[i] = fmt.Sprintf("loop %d", l.N)
	}
	err = plot.SVG(f, loops, plot.Options{
		Title:  fmt.Sprintf("%s — %s, %s", run.Specimen, run.Recipe, run.Started.UTC().Format(time.DateTime)),
		Labels: labels,
	})
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	return err
}

// PrintFigures writes a table of every loop's figures with their expanded
// uncertainties (k = 2) and units, rounded to U (calib/units.Rounded).
func PrintFigures(w io.Writer, loops []record.Loop) {
	for _, l := range loops {
		fmt.Fprintf(w, "\nloop %d (%s, ±%.6g %s)\n", l.N, l.Kind, l.Amplitude, l.AmpUnit)
		tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', tabwriter.AlignRight)
		fmt.Fprintln(tw, "figure\tvalue\t± U (k=2)\tunit\t")
		for _, f := range l.Figures {
			v, u := units.Rounded(f.Value, f.U) // GUM 7.2.6
			fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t\n", f.Name, v, u, f.Unit)
		}
		tw.Flush()
		var cs []string
		for _, c := range l.Corrections {
			cs = append(cs, fmt.Sprintf("%s %.3g %s", c.Name, c.Size, c.Unit))
		}
		if len(cs) > 0 {
			fmt.Fprintf(w, "corrections: %s\n", strings.Join(cs, "; "))
		}
	}
}

// progress prints one line per step and a progress line now and then, and
// forwards every event to a hub when one is given. It never blocks the engine.
type progress struct {
	out     io.Writer
	hub     *live.Hub
	last    string
	lastPct int
}

func (p *progress) Publish(ev live.Event) {
	if p.hub != nil {
		p.hub.Publish(ev)
	}
	switch ev.Kind {
	case live.KindProgress:
		name := fmt.Sprintf("step %d/%d %s", ev.Step, ev.Steps, ev.StepName)
		pct := int(ev.Fraction * 100)
		if name != p.last {
			fmt.Fprintf(p.out, "  %3d %%  %s\n", pct, name)
			p.last, p.lastPct = name, pct
		} else if pct >= p.lastPct+10 {
			fmt.Fprintf(p.out, "  %3d %%\n", pct)
			p.lastPct = pct
		}
	case live.KindState:
		if ev.Reason != "" {
			fmt.Fprintf(p.out, "  run %s: %s\n", ev.State, ev.Reason)
		}
	}
}

// ForwardError says that a forward the demo was asked for did not deliver
// the run: the server refused loops (quarantined, with its reason), or
// nothing was acknowledged. The run itself is stored.
type ForwardError struct {
	URL         string
	Sent        int                 // points acknowledged
	Quarantined []store.OutboxEntry // loops of the run the server refused
	DB          string
	Err         error // why the delivery gave up, if it did
}

func (e *ForwardError) Error() string {
	switch {
	case e.Err != nil:
		return fmt.Sprintf("sending to %s: %v (%d points acknowledged)", e.URL, e.Err, e.Sent)
	case len(e.Quarantined) > 0:
		return fmt.Sprintf("sending to %s: the server refused %d loop(s) (%d points acknowledged): %s; they stay in %s: fix the URL or bucket, then hystd outbox requeue %s",
			e.URL, len(e.Quarantined), e.Sent, e.Quarantined[0].LastError, e.DB, e.Quarantined[0].RunID)
	}
	return fmt.Sprintf("sending to %s: no point was acknowledged", e.URL)
}

func (e *ForwardError) Unwrap() error { return e.Err }

// quarantinedOf lists the quarantined outbox entries of one run.
func quarantinedOf(ctx context.Context, st *store.Store, runID string) ([]store.OutboxEntry, error) {
	q, err := st.Quarantined(ctx, 0)
	if err != nil {
		return nil, err
	}
	var out []store.OutboxEntry
	for _, e := range q {
		if e.RunID == runID {
			out = append(out, e)
		}
	}
	return out, nil
}

// engineClock is the engine's clock: clk, or late(clk) in a test.
func engineClock(clk clock.Clock, late func(clock.Clock) clock.Clock) clock.Clock {
	if late == nil {
		return clk
	}
	return late(clk)
}
