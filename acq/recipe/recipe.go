// Package recipe reads measurement recipes (YAML, `kind: recipe`) and expands
// them into concrete setpoint programs for one fixture and specimen.
//
// A recipe is data: a list of steps, each a mapping with exactly one key that
// names its kind:
//
//	demagnetize      decaying reversals from above the highest test level down to (near) zero
//	condition        cycles at a test amplitude until the loop repeats; not stored
//	record_loop      recorded symmetric loops: pre hold at +A, sweep +A → −A → +A, post hold
//	normal_curve     a family of amplitudes, each conditioned then recorded (normal curve)
//	demag_curve      2nd-quadrant curve of a magnet from saturation, optional recoil loops
//	drift_hold       the field held static while the integrator drift is measured
//	wait             the level held for a while, nothing measured
//
// Each kind is declared once: its type in step_<key>.go (the YAML, its
// checks and defaults, its expansion) and its entry in stepTable
// (steps.go); a new kind is a field of StepSpec, that entry, its file and
// its test.
//
// Expand turns a recipe into []Step for a fixture: levels in the unit the
// engine commands (A for control: current, A/m for control: field), segment
// durations from the rates, and a refusal, naming the step and the limit, of
// any step that would cross a fixture limit. A Recipe is immutable after
// Parse and safe for concurrent use.
package recipe

import (
	"fmt"
	"time"

	"hystd/configs"
)

// Kind is the value of `kind:` in a recipe file.
const Kind = "recipe"

// Control says what the sweep is controlled in.
const (
	// ControlCurrent: setpoints are currents sent to the supply (open loop);
	// H follows from H = N1·I/l_m on a closed magnetic circuit.
	ControlCurrent = "current"
	// ControlField: setpoints are field strengths H; the engine adjusts the
	// current until the measured H follows (closed loop, for yokes where H is
	// not proportional to I).
	ControlField = "field"
)

// DefaultPeriod is the setpoint period of steps that record nothing.
const DefaultPeriod = 50 * time.Millisecond

// DefaultHold is the pre and post hold of a recorded loop when none is given.
const DefaultHold = 2 * time.Second

// Recipe is one parsed recipe file.
type Recipe struct {
	Kind        string `yaml:"kind"`
	Name        string `yaml:"name"`
	Description string `yaml:"description"`
	// Control is "current" (default) or "field".
	Control string `yaml:"control"`
	// FieldGain is the closed-loop gain in A per A/m of field error, applied
	// once per period (control: field). 0: l_m/N1 when the fixture takes H
	// from the current, otherwise required.
	FieldGain float64 `yaml:"field_gain_a_per_a_m"`
	// IntegratorRange is the integrator's full scale in Wb-turns (V·s), set
	// before the first step; 0 leaves the instrument's range. It must hold
	// N2·A·(B swing) of the largest loop (REFERENCE: N2·A·2·Bmax).
	IntegratorRange float64 `yaml:"integrator_range_wb"`
	// Period is the setpoint period of steps that record nothing; default 50ms.
	Period configs.Duration `yaml:"period"`
	// Specimen names the specimen the recipe is meant for (an id of the
	// daemon's specimen registry, or a specimen file); "" runs on the
	// fixture's mounted specimen. A submission's own choice takes precedence.
	Specimen string     `yaml:"specimen"`
	Steps    []StepSpec `yaml:"steps"`

	doc  *configs.Doc
	text []byte
}

// Load reads and parses a recipe file.
func Load(path string) (*Recipe, error) {
	data, err := configs.ReadFile(path)
	if err != nil {
		return nil, err
	}
	return Parse(path, data)
}

// Parse decodes and validates a recipe on its own (no fixture yet); file
// names it in errors. Every problem is returned as configs.Errors.
func Parse(file string, data []byte) (*Recipe, error) {
	if len(data) > configs.MaxFileSize {
		return nil, &configs.Error{File: file, Problem: fmt.Sprintf("%d bytes, larger than the %d bytes (1 MiB) a recipe may have", len(data), configs.MaxFileSize)}
	}
	doc, err := configs.Parse(file, data)
	if err != nil {
		return nil, err
	}
	return FromDoc(doc, data)
}

// Bounds of a recipe, so that no recipe can make the daemon plan for ever,
// run out of memory or overflow a duration. A recipe beyond one is refused
// with its file, line and step.
const (
	// MaxSteps is the most steps a recipe may list.
	MaxSteps = 1000
	// MaxLevel bounds every level, in A or A/m (100 MA/m is μ0·H ≈ 126 T).
	MaxLevel = 1e8
	// MinRate and MaxRate bound every rate, in A/s or A/m per second.
	MinRate, MaxRate = 1e-6, 1e9
	// MaxHold bounds the pre and post holds of a recorded sweep.
	MaxHold = time.Hour
	// MaxSampleInterval bounds the sample interval of a recorded sweep.
	MaxSampleInterval = time.Minute
	// MaxDriftHold bounds a drift_hold.
	MaxDriftHold = 24 * time.Hour
	// MaxWait bounds a wait.
	MaxWait = 7 * 24 * time.Hour
	// MaxSegment bounds one ramp of the expanded plan (|ΔI|/rate).
	MaxSegment = 24 * time.Hour
	// MaxPlan bounds the whole expanded plan.
	MaxPlan = 7 * 24 * time.Hour
	// MaxPoints bounds the points per sweep.
	MaxPoints = 1_000_000
	// MaxLoopSamples bounds the samples of one recorded step (holds and
	// sweep), which the engine keeps in memory until the loop is stored.
	MaxLoopSamples = 2_500_000
	// MaxReversals bounds the reversals of one demagnetize step.
	MaxReversals = 1000
	// MaxSegments bounds the ramps and holds of the whole expanded plan.
	MaxSegments = 200_000
)

// FromDoc decodes and validates a parsed recipe document; data is kept as the
// recipe text for the run record.
func FromDoc(doc *configs.Doc, data []byte) (*Recipe, error) {
	// Refuse an oversized step list before decoding it.
	if n, line := doc.Items("steps"); n > MaxSteps {
		return nil, &configs.Error{File: doc.File, Line: line, Key: "steps",
			Problem: fmt.Sprintf("%d steps, more than the %d a recipe may have", n, MaxSteps)}
	}
	r := &Recipe{}
	if err := doc.Decode(r); err != nil {
		return nil, err
	}
	r.doc = doc
	r.text = append([]byte(nil), data...)
	if err := r.validate(); err != nil {
		return nil, err
	}
	return r, nil
}

// Text returns the recipe file as it was parsed.
func (r *Recipe) Text() []byte { return append([]byte(nil), r.text...) }

// File returns the file name the recipe was parsed from.
func (r *Recipe) File() string { return r.doc.File }

// PeriodOr returns the setpoint period of steps that record nothing.
func (r *Recipe) PeriodOr() time.Duration {
	if r.Period > 0 {
		return r.Period.D()
	}
	return DefaultPeriod
}
