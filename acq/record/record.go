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
