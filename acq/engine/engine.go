package engine

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"regexp"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"

	"hystd/acq/config"
	"hystd/acq/live"
	"hystd/acq/process"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/acq/safety"
	"hystd/calib/units"
)

// Stop is the cause, given to context.WithCancelCause, that ends a run with
// a chosen state and reason; it is also the error Run returns for a run that
// did not finish.
type Stop struct {
	State  record.State
	Reason string
}

func (s *Stop) Error() string { return fmt.Sprintf("run %s: %s", s.State, s.Reason) }

// Abort returns the cancel cause of a run aborted for reason.
func Abort(reason string) error { return &Stop{State: record.Aborted, Reason: reason} }

// Refused is returned by Prepare for a recipe the fixture must not run; the
// wrapped error names the step and the limit. Nothing was energised and no
// run was recorded.
type Refused struct{ Err error }

func (r *Refused) Error() string { return "recipe refused: " + r.Err.Error() }
func (r *Refused) Unwrap() error { return r.Err }

// Processed is what a Processor derives from a loop's raw samples (the
// run's processor, process.Run, returns it).
type Processed = process.Processed

// Processor turns a recorded loop's raw samples (with Phase pre, sweep,
// post) into corrected points, figures and corrections. It must not keep raw.
type Processor func(raw []record.Sample, loop recipe.LoopInfo) (Processed, error)

// Publisher receives live events; Publish must not block (live.Hub does not).
type Publisher interface{ Publish(live.Event) }

// PublishFunc adapts a function to Publisher.
type PublishFunc func(live.Event)

// Publish calls f(e).
func (f PublishFunc) Publish(e live.Event) { f(e) }

// Setup is everything one run needs.
type Setup struct {
	RunID    string // "" makes one: fixture, UTC time and a random suffix
	Fixture  config.Fixture
	Specimen config.Specimen
	Recipe   *recipe.Recipe
	// Geometry converts A/m to A; zero: recipe.GeometryOf(Fixture, Specimen).
	Geometry recipe.Geometry
	// Area is the specimen's cross-section for the live B estimate; 0: no estimate.
	Area        units.SquareMetre
	Instruments Instruments
	Writer      record.Writer // required
	Process     Processor     // nil: loops are stored raw, with an event saying so
	Live        Publisher     // optional
	Clock       Clock         // nil: RealClock
	Log         *slog.Logger  // nil: slog.Default()
	Software    string        // hystd version for the run record
	Operator    string        // who started the run, recorded with it; may be ""
	// Config is the config snapshot stored with the run; "" builds one from
	// the fixture, the specimen and the recipe text.
	Config string
	// SpoolDir receives, as gob files (ReadSpool), completed loops the Writer still
	// refuses at the end of the run; "" means the working directory.
	SpoolDir string
	Queued   time.Time // zero: now
}

// Plan is a prepared run: the recipe expanded for the fixture and the run
// recorded as queued.
type Plan struct {
	Steps []recipe.Step
	run   record.Run
	s     Setup
	total time.Duration
}

// Run returns the run record as prepared, or as ended once Execute or End
// returned. It must not be called while Execute runs (use the run ID taken
// before).
func (p *Plan) Run() record.Run { return p.run }

// Run prepares and executes a recipe; see Prepare and Plan.Execute.
func Run(ctx context.Context, s Setup) (record.Run, error) {
	p, err := Prepare(ctx, s)
	if err != nil {
		return record.Run{}, err
	}
	return p.Execute(ctx)
}

var idUnsafe = regexp.MustCompile(`[^A-Za-z0-9._-]+`)

// NewRunID returns a unique run id: fixture, UTC time to the second and 6 hex digits.
func NewRunID(fixture string, at time.Time) string {
	var b [3]byte
	_, _ = rand.Read(b[:])
	return fmt.Sprintf("%s-%s-%s", idUnsafe.ReplaceAllString(fixture, "_"), at.UTC().Format("20060102T150405Z"), hex.EncodeToString(b[:]))
}

// Prepare checks the setup, expands the recipe for the fixture (a recipe that
// would cross a fixture limit or the supply's range is returned as *Refused)
// and creates the run in the Writer in state queued.
func Prepare(ctx context.Context, s Setup) (*Plan, error) {
	if s.Recipe == nil || s.Writer == nil {
		return nil, errors.New("engine: a setup needs a recipe and a writer")
	}
	if s.Clock == nil {
		s.Clock = RealClock{}
	}
	if s.Log == nil {
		s.Log = slog.Default()
	}
	if s.Geometry == (recipe.Geometry{}) {
		g, err := recipe.GeometryOf(s.Fixture, s.Specimen)
		if err != nil && needsGeometry(s) {
			return nil, &Refused{err}
		}
		s.Geometry = g
	}
	steps, err := recipe.Expand(s.Recipe, s.Fixture, s.Geometry)
	if err != nil {
		return nil, &Refused{err}
	}
	if err := checkSupply(s, steps); err != nil {
		return nil, err
	}
	if err := checkCapture(s, steps); err != nil {
		return nil, err
	}
	now := s.Clock.Now()
	if s.Queued.IsZero() {
		s.Queued = now
	}
	if s.RunID == "" {
		s.RunID = NewRunID(s.Fixture.Name, now)
	}
	if s.Config == "" {
		s.Config = snapshot(s)
	}
	sum := sha256.Sum256([]byte(s.Config))
	run := record.Run{
		ID: s.RunID, Recipe: s.Recipe.Name, RecipeText: string(s.Recipe.Text()),
		Fixture: s.Fixture.Name, Specimen: s.Specimen.ID, Material: s.Specimen.Material,
		Grade: s.Specimen.Grade, Operator: s.Operator,
		Config: s.Config, ConfigHash: hex.EncodeToString(sum[:]), Software: s.Software,
		State: record.Queued, Queued: s.Queued,
	}
	if err := s.Writer.CreateRun(ctx, run); err != nil {
		return nil, fmt.Errorf("record run %s: %w", run.ID, err)
	}
	p := &Plan{Steps: steps, run: run, s: s}
	p.geometryWarnings(ctx)
	for _, st := range steps {
		p.total += st.Duration()
	}
	p.publish(live.Event{Kind: live.KindState, State: record.Queued, Steps: len(steps)})
	return p, nil
}

// geometryWarnings records the specimen geometry's warnings (a strip length
// outside what IEC 60404-2 assumes, a ring too wide for IEC 60404-4) as
// events of the run, so that they show with it and not only in the log.
func (p *Plan) geometryWarnings(ctx context.Context) {
	_, warns, err := process.SetupFrom(p.s.Fixture, p.s.Specimen)
	if err != nil {
		return // a fixture with H from its field meter may run without a geometry
	}
	at := p.s.Clock.Now()
	for _, w := range warns {
		text := fmt.Sprintf("geometry of specimen %s: %s", p.s.Specimen.ID, w)
		p.s.Log.Warn(text, "run", p.run.ID)
		wctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), WriteTimeout)
		if err := p.s.Writer.AddEvent(wctx, record.Event{RunID: p.run.ID, At: at, Level: "warn", Text: text}); err != nil {
			p.s.Log.Error("event not stored", "run", p.run.ID, "err", err)
		}
		cancel()
	}
}

// checkSupply refuses steps beyond the supply's range (when a supply is given).
func checkSupply(s Setup, steps []recipe.Step) error {
	if s.Instruments.Supply == nil {
		return nil
	}
	lim := s.Instruments.Supply.Limits()
	for _, st := range steps {
		if lim.MaxCurrent > 0 && st.PeakCurrent > float64(lim.MaxCurrent) {
			return &Refused{s.Recipe.Errorf(st.Source, "step %d (%s) needs %.4g A, beyond the supply's range of %g A", st.N, st.Source, st.PeakCurrent, float64(lim.MaxCurrent))}
		}
	}
	return nil
}

// SetInstruments gives a plan prepared without instruments (queued before
// its fixture's ports were opened) the opened roles and, when proc is not
// nil, the processing built for them; it refuses the plan (a *Refused) when
// a step is beyond the supply's range.
func (p *Plan) SetInstruments(in Instruments, proc Processor) error {
	s := p.s
	s.Instruments = in
	if proc != nil {
		s.Process = proc
	}
	if err := checkSupply(s, p.Steps); err != nil {
		return err
	}
	if err := checkCapture(s, p.Steps); err != nil {
		return err
	}
	p.s = s
	return nil
}

// End records the ending of a plan that will not be executed (aborted while
// queued, or its instruments could not be opened). Nothing is energised.
func (p *Plan) End(ctx context.Context, st record.State, reason string) record.Run {
	at := p.s.Clock.Now()
	wctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), WriteTimeout)
	defer cancel()
	if err := p.s.Writer.SetState(wctx, p.run.ID, st, reason, at); err != nil {
		p.s.Log.Error("run state not stored", "run", p.run.ID, "state", st, "err", err)
	}
	if err := p.s.Writer.AddEvent(wctx, record.Event{RunID: p.run.ID, At: at, Level: "warn", Text: fmt.Sprintf("run %s before it started: %s", st, reason)}); err != nil {
		p.s.Log.Error("event not stored", "run", p.run.ID, "err", err)
	}
	p.publish(live.Event{Kind: live.KindState, State: st, Reason: reason, At: at})
	p.run.State, p.run.Reason, p.run.Ended = st, reason, at
	return p.run
}

// Event stores an event with a plan that has not been executed (e.g. how
// its fixture's supply was halted after its instruments could not be
// opened).
func (p *Plan) Event(ctx context.Context, level, text string) {
	wctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), WriteTimeout)
	defer cancel()
	if err := p.s.Writer.AddEvent(wctx, record.Event{RunID: p.run.ID, At: p.s.Clock.Now(), Level: level, Text: text}); err != nil {
		p.s.Log.Error("event not stored", "run", p.run.ID, "err", err)
	}
}

func needsGeometry(s Setup) bool {
	return s.Fixture.HFrom == "current"
}

// snapshot is the config stored with a run: fixture and specimen as YAML,
// then the recipe as submitted.
func snapshot(s Setup) string {
	var b strings.Builder
	b.WriteString("# fixture\n")
	if y, err := yaml.Marshal(s.Fixture); err == nil {
		b.Write(y)
	}
	b.WriteString("---\n# specimen\n")
	if y, err := yaml.Marshal(s.Specimen); err == nil {
		b.Write(y)
	}
	b.WriteString("---\n# recipe " + s.Recipe.File() + "\n")
	b.Write(s.Recipe.Text())
	return b.String()
}

func (p *Plan) publish(e live.Event) {
	if p.s.Live == nil {
		return
	}
	e.RunID = p.run.ID
	if e.At.IsZero() {
		e.At = p.s.Clock.Now()
	}
	p.s.Live.Publish(e)
}

// Execute runs the plan. Whatever ends it — the last step, a crossed limit,
// an instrument error, ctx cancelled (with a *Stop cause for a chosen state
// and reason) — the supply is halted with a fresh context and the final
// state and reason are recorded before Execute returns. The error is nil for
// a finished run, a *Stop otherwise.
func (p *Plan) Execute(ctx context.Context) (record.Run, error) {
	if p.s.Instruments.Supply == nil {
		return p.End(ctx, record.Failed, "no supply opened for the fixture"), &Stop{State: record.Failed, Reason: "no supply"}
	}
	x := newExec(p)
	err := x.steps(ctx)
	return x.end(ctx, err)
}

// Caution is the safety text logged whenever a run energises a winding.
func Caution(fx config.Fixture, peakA float64) string {
	l := fx.Winding.InductanceH
	e := 0.5 * l * peakA * peakA
	return fmt.Sprintf("CAUTION: fixture %q will carry up to %.3g A; stored energy ½·L·I² ≈ %.3g J (L = %g H). "+
		"Never open or unplug a winding that carries current: interrupting it induces L·dI/dt, kilovolts within a millisecond. "+
		"Keep the freewheel path and interlocks in place and the emergency stop within reach; keep people with implants out of the field. "+
		"Local electrical codes and the lab's licensed practice take precedence over this program.", fx.Name, peakA, e, l)
}

// classify decides the final state and reason from how the steps ended.
func classify(ctx context.Context, err error) (record.State, string) {
	if err == nil {
		return record.Finished, ""
	}
	if ctx.Err() != nil {
		cause := context.Cause(ctx)
		var st *Stop
		if errors.As(cause, &st) {
			return st.State, st.Reason
		}
		return record.Aborted, "cancelled: " + cause.Error()
	}
	var st *Stop
	if errors.As(err, &st) {
		return st.State, st.Reason
	}
	var v *safety.Violation
	if errors.As(err, &v) {
		return record.Failed, v.Text
	}
	return record.Failed, err.Error()
}

func finite(v float64) float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0
	}
	return v
}
