// Package record defines what an acquisition produces and what every store
// keeps: a run, its loops, each loop's raw samples as read from the
// instruments, the corrected samples, the figures and the corrections that
// were applied. The engine emits these values; stores and the API read them.
// The types carry no behaviour beyond small helpers.
package record

import (
	"context"
	"errors"
	"time"
)

// State is where a run stands. A run ends in exactly one of Finished,
// Aborted or Failed, recorded with a reason.
type State string

// Run states.
const (
	Queued   State = "queued"
	Running  State = "running"
	Finished State = "finished"
	Aborted  State = "aborted"
	Failed   State = "failed"
)

// Ended reports whether s is a final state.
func (s State) Ended() bool { return s == Finished || s == Aborted || s == Failed }

// Run is one execution of a recipe on a fixture.
type Run struct {
	ID         string // unique, stable, used as a tag downstream
	Recipe     string // recipe name
	RecipeText string // the recipe file as submitted
	Fixture    string
	Specimen   string // specimen id
	Material   string
	Grade      string // material grade the specimen is judged against; "" for none
	Operator   string // who started the run, as given; "" when not given
	Config     string // snapshot of fixture + specimen + recipe config (YAML)
	ConfigHash string // hex SHA-256 of Config
	Software   string // hystd version
	State      State
	Reason     string // why it ended (empty when finished normally)
	Queued     time.Time
	Started    time.Time
	Ended      time.Time
	// Revision is the run's latest revision (1 for a run never
	// re-processed). The fields above are those of revision 1, as
	// recorded; Revisions gives each revision's specimen and config.
	Revision int
}

// Revision is one processing of a run's raw samples. Revision 1 is the
// processing done when the run was recorded (or imported); each re-process
// adds the next one with a changed specimen or fixture. Raw samples are
// never changed: every revision is computed from the same ones.
type Revision struct {
	RunID      string
	N          int       // 1, 2, …
	At         time.Time // when it was made (revision 1: the run's end)
	By         string    // who made it (revision 1: the run's operator)
	Change     string    // what differs from the revision before it; "" for revision 1
	Fixture    string
	Specimen   string
	Material   string
	Grade      string
	Config     string // fixture and specimen (YAML) it was computed with
	ConfigHash string // hex SHA-256 of Config
}

// At returns r as revision v sees it: fixture, specimen, material, grade
// and config of v. The other fields are the run's.
func (r Run) At(v Revision) Run {
	r.Fixture, r.Specimen, r.Material, r.Grade = v.Fixture, v.Specimen, v.Material, v.Grade
	r.Config, r.ConfigHash = v.Config, v.ConfigHash
	return r
}

// FirstRevision is revision 1 of a run that was never re-processed: the
// run as recorded.
func FirstRevision(r Run) Revision {
	at := r.Ended
	if at.IsZero() {
		at = r.Started
	}
	return Revision{RunID: r.ID, N: 1, At: at, By: r.Operator, Fixture: r.Fixture, Specimen: r.Specimen,
		Material: r.Material, Grade: r.Grade, Config: r.Config, ConfigHash: r.ConfigHash}
}

// Phase tells which part of a loop step a raw sample belongs to.
type Phase string

// Phases of a loop step.
const (
	PreHold  Phase = "pre"   // field static before the sweep: drift rate
	Sweep    Phase = "sweep" // the loop itself
	PostHold Phase = "post"  // field static after the sweep: drift rate
)

// Sample is one concurrent read of every channel, in SI units, uncorrected.
// Channels a fixture does not have are NaN.
//
// Each channel keeps its own time: T is the midpoint (request to reply) of
// the flux reading — of the current reading on a fixture without an
// integrator — and DtI and DtB are the offsets of the current's and the
// field meter's midpoints from T (positive: read later). The current of a
// sample was therefore read at T+DtI, the probe field at T+DtB. Samples
// stored before these offsets existed read back with zero offsets. V and
// TempC are not aligned (V shares the supply's round trip; temperature
// changes slowly).
type Sample struct {
	T        time.Duration // since the run started, monotonic clock; the flux reading's midpoint
	TUnc     time.Duration // timing uncertainty of each channel's own time: the largest half round trip
	DtI      time.Duration // current reading's midpoint − T
	DtB      time.Duration // field-meter reading's midpoint − T (0 without a field meter)
	Phase    Phase
	Setpoint float64 // A, or A/m when sweeping in closed loop on H
	I        float64 // A, supply current read back
	V        float64 // V, supply output voltage
	Psi      float64 // Wb-turns (V·s), integrator reading
	BProbe   float64 // T, field-meter reading
	TempC    float64 // °C
}

// Point is one corrected sample.
type Point struct {
	T      time.Duration
	H      float64 // A/m
	B      float64 // T
	J      float64 // T, J = B − μ0·H
	Branch int     // +1 rising H, −1 falling H, 0 initial curve or unknown
}

// Figure is one reported value with its expanded uncertainty (k = 2).
type Figure struct {
	Name  string // e.g. "Br", "HcB", "BHmax"; see calib for the list
	Value float64
	U     float64 // expanded uncertainty, k = 2, same unit; NaN if not evaluated
	Unit  string  // SI unit symbol
	Note  string  // how it was obtained, e.g. "interpolated, mean of both branches"
}

// Correction is one correction applied on the way from raw to corrected
// samples, with its size, so a reviewer sees what was done.
type Correction struct {
	Name string // e.g. "drift-baseline", "closure", "centering", "air-flux"
	Size float64
	Unit string
	Note string
}

// Loop is one recorded loop (or curve) of a run with everything derived from it.
type Loop struct {
	RunID       string
	N           int    // 1-based index within the run
	Kind        string // "loop", "normal-curve", "demag-curve", "recoil"
	Amplitude   float64
	AmpUnit     string // "A/m" or "A"
	Started     time.Time
	Raw         []Sample
	Points      []Point
	Figures     []Figure
	Corrections []Correction
	// Verdicts are the loop's figures judged against the specimen's
	// material grade (package acq/grade); empty when no grade applies.
	Verdicts []Verdict
	// Revision is the run revision the derived values (points, figures,
	// corrections, verdicts) belong to; 0 is read as 1. Raw samples are
	// the same in every revision.
	Revision int
	// Ramped says the supply ramped continuously during the sweep
	// (buffered capture, sweep_mode: ramp) and H was interpolated at each
	// flux reading's instant; re-processing the loop budgets the timing
	// uncertainty again (acq/process, Setup.Ramped).
	Ramped bool
}

// Outcome is a conformity verdict.
type Outcome string

// Outcomes of a conformity decision.
const (
	Pass      Outcome = "pass"
	Fail      Outcome = "fail"
	Undecided Outcome = "undecided"
)

// Verdict is one figure of a loop judged against one limit of a material
// grade under a named decision rule (see acq/grade for the rules).
type Verdict struct {
	Grade   string  // grade name
	Figure  string  // figure name, as in Figure.Name
	Value   float64 // the figure's value
	U       float64 // its expanded uncertainty (k = 2); NaN if not evaluated
	Min     float64 // lower limit; NaN: none
	Max     float64 // upper limit; NaN: none
	Unit    string
	Rule    string // decision rule name, e.g. "guarded-U"
	Outcome Outcome
	Note    string // the conditions that made the limit apply, and why undecided
}

// Worst returns the loop-level outcome of vs: fail if any failed, else
// undecided if any is undecided, else pass; "" when vs is empty.
func Worst(vs []Verdict) Outcome {
	var o Outcome
	for _, v := range vs {
		switch {
		case v.Outcome == Fail:
			return Fail
		case v.Outcome == Undecided:
			o = Undecided
		case o == "":
			o = Pass
		}
	}
	return o
}

// Event is a timestamped note on a run: step started, limit crossed, reconnect.
type Event struct {
	RunID string
	At    time.Time
	Level string // "info", "warn", "error"
	Text  string
}

// ErrNotFound is returned by a Reader for an unknown run or loop.
var ErrNotFound = errors.New("not found")

// RunFilter selects runs; zero fields match everything.
type RunFilter struct {
	Fixture  string
	Specimen string
	Material string
	State    State
	Since    time.Time // Started at or after
	Until    time.Time // Started before
	Limit    int       // 0: a store default
}

// TrendPoint is one figure of one loop, for trending a specimen over time.
type TrendPoint struct {
	RunID string
	Loop  int
	At    time.Time
	Value float64
	U     float64
}

// Reader is the read side of a store, used by the API and the review page.
type Reader interface {
	Runs(ctx context.Context, f RunFilter) ([]Run, error) // newest first
	Run(ctx context.Context, id string) (Run, error)      // ErrNotFound
	// Loops returns a run's loops without Raw and Points (figures and corrections only).
	Loops(ctx context.Context, runID string) ([]Loop, error)
	Loop(ctx context.Context, runID string, n int) (Loop, error) // ErrNotFound
	Events(ctx context.Context, runID string) ([]Event, error)
	// Revisions returns a run's revisions, oldest first; a run never
	// re-processed has one, FirstRevision of it. ErrNotFound for an
	// unknown run.
	Revisions(ctx context.Context, runID string) ([]Revision, error)
	// LoopsOf and LoopOf are Loops and Loop of one revision; rev 0 is the
	// latest (what Loops and Loop return). ErrNotFound for an unknown
	// revision.
	LoopsOf(ctx context.Context, runID string, rev int) ([]Loop, error)
	LoopOf(ctx context.Context, runID string, n, rev int) (Loop, error)
	// Trend reads the latest revision of each run.
	Trend(ctx context.Context, specimen, figure string, since time.Time) ([]TrendPoint, error)
}

// Writer is the write side of a store, used by the engine. AddLoop commits a
// loop with all its samples, figures and corrections in one transaction.
type Writer interface {
	CreateRun(ctx context.Context, r Run) error
	SetState(ctx context.Context, id string, s State, reason string, at time.Time) error
	AddLoop(ctx context.Context, l Loop) error
	AddEvent(ctx context.Context, e Event) error
}

// Reviser stores a re-processed run. AddRevision stores revision v (v.N
// must be the run's latest revision + 1, the run must have ended) with
// every loop of it (their Revision v.N; their Raw is not stored again) and
// an outbox entry per loop, all in one transaction: after a crash either
// the whole revision is there or none of it. The earlier revisions stay.
type Reviser interface {
	AddRevision(ctx context.Context, v Revision, loops []Loop) error
}
