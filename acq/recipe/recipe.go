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

// StepSpec is one step as written: exactly one field is set.
type StepSpec struct {
	Demagnetize *Demagnetize `yaml:"demagnetize"`
	Condition   *Condition   `yaml:"condition"`
	RecordLoop  *RecordLoop  `yaml:"record_loop"`
	NormalCurve *NormalCurve `yaml:"normal_curve"`
	DemagCurve  *DemagCurve  `yaml:"demag_curve"`
	DriftHold   *DriftHold   `yaml:"drift_hold"`
	Wait        *Wait        `yaml:"wait"`
}

// Demagnetize reverses the level with an amplitude that shrinks by Ratio at
// each reversal, from From down to below DownTo, then returns to zero.
type Demagnetize struct {
	From   Level   `yaml:"from"`    // first amplitude; must exceed every test level of the recipe
	Ratio  float64 `yaml:"ratio"`   // amplitude of each reversal over the previous one, 0.5–0.98; default 0.9
	DownTo Level   `yaml:"down_to"` // stop below this amplitude; default From/100
	Rate   Rate    `yaml:"rate"`
}

// Condition cycles ±Amplitude Cycles times, recording nothing.
type Condition struct {
	Amplitude Level `yaml:"amplitude"`
	Cycles    int   `yaml:"cycles"` // default 5
	Rate      Rate  `yaml:"rate"`
}

// Sampling says how densely a recorded sweep is sampled: Points per sweep or
// one sample every Interval. One of the two is required.
type Sampling struct {
	Points   int              `yaml:"points"`
	Interval configs.Duration `yaml:"sample_interval"`
	// Hold is the static pre and post hold around the sweep (drift rate);
	// default 2s.
	Hold configs.Duration `yaml:"hold"`
	// Capture and BufferPeriod choose how the sweep's flux and field are
	// read: polled (default) or buffered; see capture.go.
	Capture      string           `yaml:"capture"`
	BufferPeriod configs.Duration `yaml:"buffer_period"`
}

// RecordLoop records Cycles symmetric loops of ±Amplitude, each stored.
// With Peak, Amplitude is the first try of a search for the amplitude that
// gives the loop the stated peak induction (see Peak).
type RecordLoop struct {
	Amplitude Level `yaml:"amplitude"`
	Rate      Rate  `yaml:"rate"`
	Cycles    int   `yaml:"cycles"` // recorded loops, default 1
	Peak      *Peak `yaml:"peak"`
	Sampling  `yaml:",inline"`
}

// Peak aims a recorded loop at a peak induction B or polarization J (soft
// materials are quoted at a stated peak, e.g. 1.0 or 1.5 T, common
// practice). Before recording, the engine tries loops at amplitudes chosen
// by secant steps on the measured tip against the amplitude, at most Tries,
// never above the fixture's max current, until the tip is within Tolerance
// of the target; it then conditions at that amplitude and records.
type Peak struct {
	B         *Induction `yaml:"b"`         // target peak B; or
	J         *Induction `yaml:"j"`         // target peak J = B − μ0·H
	Tolerance Induction  `yaml:"tolerance"` // default 1 % of the target
	Tries     int        `yaml:"tries"`     // default 8
}

// NormalCurve records one loop at each amplitude, each after Cycles
// conditioning cycles; the tips form the normal (commutation) curve. Give
// Amplitudes, or From, To and Count for geometric spacing.
type NormalCurve struct {
	Amplitudes []Level `yaml:"amplitudes"`
	From       *Level  `yaml:"from"`
	To         *Level  `yaml:"to"`
	Count      int     `yaml:"count"`
	Cycles     int     `yaml:"cycles"` // conditioning cycles per amplitude, default 3
	Rate       Rate    `yaml:"rate"`
	// BAt lists fields (A/m) at which B is read on the normal curve and
	// reported as figures b_at_<H>_a_m (electrical steel is quoted at 800,
	// 2500 and 5000 A/m, common practice); each must lie within the
	// family's amplitudes.
	BAt      []Level `yaml:"b_at"`
	Sampling `yaml:",inline"`
}

// DemagCurve magnetizes to +Saturate and records the sweep down to To (a
// negative level, through the 2nd quadrant). Each entry of RecoilAt adds a
// recorded recoil loop: saturate again, sweep down to that level, up to
// RecoilTo (default 0) and back.
type DemagCurve struct {
	Saturate Level   `yaml:"saturate"`
	To       Level   `yaml:"to"`
	Rate     Rate    `yaml:"rate"`
	RecoilAt []Level `yaml:"recoil_at"`
	RecoilTo *Level  `yaml:"recoil_to"`
	Sampling `yaml:",inline"`
}

// DriftHold holds At (default 0) for Duration while the integrator drift is measured.
type DriftHold struct {
	At       *Level           `yaml:"at"`
	Duration configs.Duration `yaml:"duration"`
	Rate     *Rate            `yaml:"rate"` // to reach At; required when At is not 0
}

// Wait holds the present level for Duration.
type Wait struct {
	Duration configs.Duration `yaml:"duration"`
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

// kindOf returns the kind name and the number of kinds set.
func (s StepSpec) kindOf() (string, int) {
	name, n := "", 0
	set := func(ok bool, k string) {
		if ok {
			name = k
			n++
		}
	}
	set(s.Demagnetize != nil, "demagnetize")
	set(s.Condition != nil, "condition")
	set(s.RecordLoop != nil, "record_loop")
	set(s.NormalCurve != nil, "normal_curve")
	set(s.DemagCurve != nil, "demag_curve")
	set(s.DriftHold != nil, "drift_hold")
	set(s.Wait != nil, "wait")
	return name, n
}

const stepKinds = "demagnetize, condition, record_loop, normal_curve, demag_curve, drift_hold, wait"

func stepPath(i int, kind string) string { return fmt.Sprintf("steps.%d.%s", i, kind) }
