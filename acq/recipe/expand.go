package recipe

import (
	"fmt"
	"math"
	"strings"
	"time"

	"hystd/acq/config"
	"hystd/acq/process"
	"hystd/acq/record"
	"hystd/calib/units"
	"hystd/configs"
)

// StepKind names what an expanded step does.
type StepKind string

// Expanded step kinds. A normal_curve expands to Condition and Record steps;
// a demag_curve to Record steps; the plan ends with a Return to zero.
const (
	KindDemagnetize StepKind = "demagnetize"
	KindCondition   StepKind = "condition"
	KindRecord      StepKind = "record"
	KindDriftHold   StepKind = "drift_hold"
	KindWait        StepKind = "wait"
	KindReturn      StepKind = "return"
)

// Loop kinds of record.Loop written by Record steps (defined with the
// run's processor, which treats each kind its own way).
const (
	LoopKindLoop   = process.LoopKindLoop
	LoopKindNormal = process.LoopKindNormal
	LoopKindDemag  = process.LoopKindDemag
	LoopKindRecoil = process.LoopKindRecoil
)

// Segment is one piece of a setpoint program: the level moves linearly from
// where the previous segment ended to To in Dur (a hold when it does not move).
type Segment struct {
	To    float64       // level at the end, in the step's Unit
	Dur   time.Duration // time to get there
	Phase record.Phase  // "" when not recorded; PreHold, Sweep or PostHold
}

// LoopInfo describes the record.Loop a Record step produces; it is defined
// with the run's processor (process.LoopInfo), which reads it.
type LoopInfo = process.LoopInfo

// Step is one concrete setpoint program of an expanded recipe.
type Step struct {
	N        int      // 1-based position in the plan
	Source   string   // recipe key it came from, e.g. "steps.2.record_loop"
	Kind     StepKind //
	Control  string   // ControlCurrent or ControlField
	Unit     string   // unit of From and of every Segment.To: A (current) or A/m (field)
	From     float64  // level at the start of the step
	Segments []Segment
	Period   time.Duration // setpoint and sample period
	Loop     *LoopInfo     // non-nil for Record steps
	// FieldGain is the closed-loop gain in A per A/m of error (control: field).
	FieldGain float64
	// PeakCurrent (A) and PeakSlew (A/s) are the largest the step asks for;
	// NaN when they cannot be known before the run (closed loop on a yoke).
	PeakCurrent, PeakSlew float64
	// Aim, for a Record step aimed at a peak induction, is the search the
	// engine runs before it; the step's own levels are those of the first try.
	Aim *Aim
	// Capture, for a Record step, is how its sweep is read (capture.go).
	Capture Capture
}

// Aim is the search for the amplitude that gives a recorded loop a stated
// peak B or J (record_loop peak:).
type Aim struct {
	Of        string  // "B" or "J"
	Target    float64 // T
	Tolerance float64 // T
	Tries     int
	// First is the first amplitude tried and Max the largest the search
	// may try (the fixture's max current), in the step's Unit; Max is NaN
	// when the fixture's limits do not say (closed loop on a field meter).
	First, Max float64
	rate       float64 // step Unit per second
	perRecipe  float64 // step Unit per unit of LoopInfo.Amplitude
	smp        Sampling
	approach   time.Duration
	period     time.Duration // setpoint period of the unrecorded parts
}

// ConditionAt returns an unrecorded step of the aimed step's search: from
// the level from to +a, then cycles of ±a, at the step's rate.
func (s Step) ConditionAt(a, from float64, cycles int) Step {
	k := s.Aim
	levels := []float64{a}
	for range cycles {
		levels = append(levels, -a, a)
	}
	var segs []Segment
	prev := from
	for _, l := range levels {
		if d := time.Duration(math.Abs(l-prev) / k.rate * float64(time.Second)).Round(time.Microsecond); d > 0 {
			segs = append(segs, Segment{To: l, Dur: max(d, 2*k.period)})
		}
		prev = l
	}
	return Step{N: s.N, Source: s.Source, Kind: KindCondition, Control: s.Control, Unit: s.Unit, From: from,
		Segments: segs, Period: k.period, FieldGain: s.FieldGain, PeakCurrent: s.PeakCurrent, PeakSlew: s.PeakSlew}
}

// AtAmplitude returns the Record step aimed at a peak, rebuilt for the
// amplitude a (in the step's Unit) from the level from: the same rate,
// holds and sampling, with the loop's amplitude set to a.
func (s Step) AtAmplitude(a, from float64) Step {
	k := s.Aim
	segs, per := recordProgram(from, a, []float64{-a, a}, k.rate, k.smp, k.approach)
	info := *s.Loop
	info.Amplitude = a / k.perRecipe
	s.Loop, s.Segments, s.Period, s.From = &info, segs, per, from
	s.Capture = captureOf(k.smp, per)
	return s
}

// recordProgram is a recorded step's program: the approach from from to
// start (at least minApproach), the pre hold, the sweep through levels and
// the post hold, with the sampling period. The pre hold is lengthened to
// end on a whole number of periods from the step's start and every sweep
// leg lasts a whole number of periods, so that the engine's samples (one
// every period from the step's start) fall on the sweep's start, its
// reversals and its end: a loop's tips are sampled, not interpolated.
func recordProgram(from, start float64, levels []float64, rate float64, smp Sampling, minApproach time.Duration) ([]Segment, time.Duration) {
	dur := func(a, b float64) time.Duration {
		sec := math.Abs(b-a) / rate
		if !(sec <= MaxSegment.Seconds()) {
			return MaxSegment
		}
		return time.Duration(sec * float64(time.Second)).Round(time.Microsecond)
	}
	var segs []Segment
	var approach time.Duration
	if d := dur(from, start); d > 0 {
		approach = max(d, minApproach)
		segs = append(segs, Segment{To: start, Dur: approach})
	}
	var sweep time.Duration
	prev := start
	for _, l := range levels {
		sweep += dur(prev, l)
		prev = l
	}
	per := period(smp, sweep)
	hold := smp.Hold.D()
	hold = (approach+hold+per-1)/per*per - approach
	segs = append(segs, Segment{To: start, Dur: hold, Phase: record.PreHold})
	prev = start
	for _, l := range levels {
		if d := dur(prev, l); d > 0 {
			n := max(1, (d+per-1)/per) // never faster than the rate asked

			segs = append(segs, Segment{To: l, Dur: n * per, Phase: record.Sweep})
		}
		prev = l
	}
	segs = append(segs, Segment{To: levels[len(levels)-1], Dur: smp.Hold.D(), Phase: record.PostHold})
	return segs, per
}

// Duration is the step's planned length.
func (s Step) Duration() time.Duration {
	var d time.Duration
	for _, g := range s.Segments {
		d += g.Dur
	}
	return d
}

// At returns the setpoint at time t since the step started, the phase of the
// segment it falls in, and whether t is past the end of the step. The phase
// is that of the sample slot t belongs to (t rounded down to a whole number
// of periods, so that a sample read a little late keeps its slot's phase),
// and a sweep's end belongs to the sweep: the sample at a loop's closing
// tip is a sweep sample, not a hold sample.
func (s Step) At(t time.Duration) (level float64, phase record.Phase, done bool) {
	level, done = s.levelAt(t)
	slot := t
	if s.Period > 0 {
		slot -= t % s.Period
	}
	return level, s.phaseAt(slot), done
}

// levelAt is the setpoint at t and whether t is past the end.
func (s Step) levelAt(t time.Duration) (float64, bool) {
	from := s.From
	var start time.Duration
	for _, g := range s.Segments {
		if t < start+g.Dur {
			f := float64(t-start) / float64(g.Dur)
			return from + (g.To-from)*f, false
		}
		start += g.Dur
		from = g.To
	}
	return from, true
}

// phaseAt is the phase at t: the segment's, with a sweep's end included in
// the sweep.
func (s Step) phaseAt(t time.Duration) record.Phase {
	var start time.Duration
	for i, g := range s.Segments {
		end := start + g.Dur
		if t < end {
			return g.Phase
		}
		if t == end && g.Phase == record.Sweep && (i+1 == len(s.Segments) || s.Segments[i+1].Phase != record.Sweep) {
			return record.Sweep
		}
		start = end
	}
	if n := len(s.Segments); n > 0 {
		return s.Segments[n-1].Phase
	}
	return ""
}

// End is the level at the end of the step.
func (s Step) End() float64 {
	if n := len(s.Segments); n > 0 {
		return s.Segments[n-1].To
	}
	return s.From
}

// String lists the step on one line, as the plan listing shows it.
func (s Step) String() string {
	var b strings.Builder
	fmt.Fprintf(&b, "%d %s", s.N, s.Kind)
	if s.Loop != nil {
		fmt.Fprintf(&b, " [%s %s]", s.Loop.Kind, fmtSI(s.Loop.Amplitude, s.Loop.AmpUnit))
	}
	fmt.Fprintf(&b, " (%s, %s) every %s: %s", s.Source, s.Control, s.Period, fmtSI(s.From, s.Unit))
	for _, g := range s.Segments {
		tag := ""
		if g.Phase != "" {
			tag = " [" + string(g.Phase) + "]"
		}
		fmt.Fprintf(&b, " → %s in %s%s", fmtSI(g.To, s.Unit), g.Dur, tag)
	}
	if k := s.Aim; k != nil {
		fmt.Fprintf(&b, "; aimed at a peak %s of %g T ± %g T in at most %d tries from the first", k.Of, k.Target, k.Tolerance, k.Tries)
	}
	if !math.IsNaN(s.PeakCurrent) {
		fmt.Fprintf(&b, "; peak %.4g A, %.4g A/s", s.PeakCurrent, s.PeakSlew)
	} else {
		b.WriteString("; peak current known only at run time")
	}
	return b.String()
}

// Geometry is what turns a field strength into a magnetizing current on a
// closed magnetic circuit: H = N1·I / l_m.
type Geometry struct {
	N1         int         // magnetizing turns
	PathLength units.Metre // magnetic path length l_m
}

// AmperePerAm returns l_m/N1, the current in A per A/m of H; 0 when unknown.
func (g Geometry) AmperePerAm() float64 {
	if g.N1 <= 0 || g.PathLength <= 0 {
		return 0
	}
	return float64(g.PathLength) / float64(g.N1)
}

// GeometryOf returns the fixture's turns and the specimen's magnetic path
// length exactly as the loop processing computes them (process.SetupFrom:
// ring mean path π(D+d)/2 per IEC 60404-4 or effective l_e per IEC 60205,
// Epstein 0.94 m per IEC 60404-2, strip, direct), so that a refusal and the
// stored H use the same l_m.
func GeometryOf(fx config.Fixture, sp config.Specimen) (Geometry, error) {
	s, _, err := process.SetupFrom(fx, sp)
	if err != nil {
		return Geometry{N1: fx.Winding.N1}, fmt.Errorf("specimen %q on fixture %q: %w", sp.ID, fx.Name, err)
	}
	g := Geometry{N1: s.N1, PathLength: s.PathLength}
	if !(g.PathLength > 0) || g.N1 <= 0 {
		return g, fmt.Errorf("specimen %q on fixture %q: path length %g m and N1 %d must be positive", sp.ID, fx.Name, float64(g.PathLength), g.N1)
	}
	return g, nil
}

// Expand turns the recipe into setpoint programs for the fixture with the
// given geometry, starting and ending at zero. It refuses, with every problem
// located as FILE:LINE: key: problem naming the step and the limit, a recipe
// that would cross a fixture limit (current, slew, compliance voltage from
// R·I + L·dI/dt, field-meter reading). Steps that can be checked only at run
// time (closed loop on a yoke) carry NaN peaks; the engine's safety checks
// then hold the limits.
func Expand(r *Recipe, fx config.Fixture, g Geometry) ([]Step, error) {
	x := &expander{r: r, fx: fx, g: g, c: &checker{doc: r.doc}}
	x.init()
	if len(x.c.es) > 0 {
		return nil, x.c.es
	}
	for i, s := range r.Steps {
		if x.full {
			break
		}
		x.step(i, s)
	}
	if x.level != 0 && !x.full {
		x.push(Step{Source: "end", Kind: KindReturn, Period: r.PeriodOr(),
			Segments: []Segment{{To: 0, Dur: x.ramp(x.level, 0, x.lastRate)}}}, "", x.lastRate)
	}
	x.checkPlan()
	return x.out, x.c.es.Err()
}

// checkPlan refuses a plan longer than MaxPlan.
func (x *expander) checkPlan() {
	var total float64 // seconds, summed in float64 so that nothing overflows
	for _, st := range x.out {
		for _, g := range st.Segments {
			total += g.Dur.Seconds()
		}
	}
	if total > MaxPlan.Seconds() {
		x.c.add("steps", "the plan lasts %s, longer than the %s a recipe may take; split it", fmtSeconds(total), fmtDur(MaxPlan))
	}
}

// fmtSeconds prints a span that may exceed time.Duration.
func fmtSeconds(s float64) string {
	if s < MaxPlan.Seconds()*100 {
		return time.Duration(s * float64(time.Second)).Round(time.Second).String()
	}
	return fmt.Sprintf("%.3g h", s/3600)
}

type expander struct {
	r        *Recipe
	fx       config.Fixture
	g        Geometry
	c        *checker
	unit     string  // unit of the plan's levels
	conv     float64 // plan unit per recipe unit
	toAmp    float64 // A per plan unit; 0 when unknown
	gain     float64
	level    float64 // plan level at the end of the last step
	lastRate float64 // plan unit per second
	out      []Step
	src      string // key of the step being expanded, for bounds
	segs     int    // segments so far
	full     bool   // MaxSegments reached: expansion stopped
	bad      map[string]bool
}

// refuse adds a bound's error once per key.
func (x *expander) refuse(path, format string, args ...any) {
	if x.bad == nil {
		x.bad = map[string]bool{}
	}
	if x.bad[path] {
		return
	}
	x.bad[path] = true
	x.c.add(path, format, args...)
}

func (x *expander) init() {
	ratio := x.g.AmperePerAm()
	recipeUnit := x.recipeUnit()
	switch x.r.Control {
	case ControlField:
		x.unit, x.conv = UnitApm, 1
		if x.fx.HFrom == "current" {
			x.toAmp = ratio
			x.gain = ratio
		}
		if x.r.FieldGain > 0 {
			x.gain = x.r.FieldGain
		}
		if x.gain == 0 {
			x.c.add("field_gain_a_per_a_m", "required for control: field on fixture %q, which takes H from its field meter", x.fx.Name)
		}
	default:
		x.unit, x.conv, x.toAmp = UnitA, 1, 1
		if recipeUnit == UnitApm {
			if x.fx.HFrom != "current" {
				x.c.add("control", "levels in A/m with control: current need a fixture with h_from: current (H = N1·I/l_m); fixture %q takes H from its field meter: use control: field or levels in A", x.fx.Name)
			} else if ratio == 0 {
				x.c.add("control", "levels in A/m need the specimen's path length and the fixture's N1")
			}
			x.conv = ratio
		}
	}
}

// recipeUnit is the unit the recipe is written in: that of the first step
// that gives one.
func (x *expander) recipeUnit() string {
	for _, s := range x.r.Steps {
		if _, b, _ := s.kind(); b != nil {
			if u, ok := b.unit(); ok {
				return u
			}
		}
	}
	return UnitA
}

func (x *expander) lv(l Level) float64 { return l.Value * x.conv }
func (x *expander) rt(r Rate) float64  { return r.Value * x.conv }

// ramp is the time from one level to another at rate. A ramp longer than
// MaxSegment (or with no finite length) is refused and given MaxSegment, so
// that no duration overflows.
func (x *expander) ramp(from, to, rate float64) time.Duration {
	if from == to {
		return 0
	}
	sec := math.Abs(to-from) / rate
	if !(sec <= MaxSegment.Seconds()) {
		x.refuse(x.src+"rate", "step %s ramps from %s to %s at %s: %s, longer than the %s one ramp may take; use a faster rate",
			strings.TrimSuffix(x.src, "."), fmtSI(from, x.unit), fmtSI(to, x.unit), fmtSI(rate, x.unit)+"/s", fmtSeconds(sec), fmtDur(MaxSegment))
		return MaxSegment
	}
	return time.Duration(sec * float64(time.Second)).Round(time.Microsecond)
}

// program builds segments through the given levels at rate, starting at
// from. A segment shorter than minDur is stretched to it (a slower sweep), so
// that the setpoints, sent once per period, reach every reversal.
func (x *expander) program(from, rate float64, phase record.Phase, minDur time.Duration, levels ...float64) []Segment {
	var segs []Segment
	for _, l := range levels {
		if d := x.ramp(from, l, rate); d > 0 {
			d = max(d, minDur)
			segs = append(segs, Segment{To: l, Dur: d, Phase: phase})
		}
		from = l
	}
	return segs
}

// push numbers the step, fills its common fields, checks its limits and
// appends it; path names the key blamed for a crossed limit.
func (x *expander) push(s Step, path string, rate float64) {
	s.N = len(x.out) + 1
	s.Control, s.Unit, s.From = x.r.Control, x.unit, x.level
	s.FieldGain = x.gain
	peak := math.Abs(s.From)
	for _, g := range s.Segments {
		peak = math.Max(peak, math.Abs(g.To))
	}
	s.PeakCurrent, s.PeakSlew = math.NaN(), math.NaN()
	if x.toAmp > 0 {
		s.PeakCurrent, s.PeakSlew = peak*x.toAmp, rate*x.toAmp
	}
	x.checkLimits(s, path, peak)
	if s.Kind == KindRecord && s.Period > 0 {
		var rec time.Duration // holds and sweep
		for _, g := range s.Segments {
			if g.Phase != "" {
				rec += g.Dur
			}
		}
		if n := rec.Seconds() / s.Period.Seconds(); n > MaxLoopSamples {
			x.refuse(s.Source, "step %d (%s) records %.3g samples (%s every %s), more than the %d one loop may hold; sample less densely or sweep faster",
				s.N, s.Source, n, rec, s.Period, MaxLoopSamples)
		}
	}
	x.segs += len(s.Segments)
	if x.segs > MaxSegments {
		x.refuse("steps", "the plan expands to more than %d ramps and holds; use fewer cycles or steps", MaxSegments)
		x.full = true
	}
	x.level = s.End()
	x.lastRate = rate
	x.out = append(x.out, s)
}

func (x *expander) checkLimits(s Step, path string, peak float64) {
	if path == "" {
		return
	}
	lim := x.fx.Limits
	where := fmt.Sprintf("step %d (%s)", s.N, s.Source)
	if !math.IsNaN(s.PeakCurrent) {
		if lim.MaxCurrentA > 0 && s.PeakCurrent > lim.MaxCurrentA {
			x.c.add(path, "%s needs a peak current of %.4g A, above the fixture limit limits.max_current_a = %g A of %q", where, s.PeakCurrent, lim.MaxCurrentA, x.fx.Name)
		}
		if lim.MaxSlewAPerS > 0 && s.PeakSlew > lim.MaxSlewAPerS {
			x.c.add(path, "%s sweeps at %.4g A/s, above the fixture limit limits.max_slew_a_per_s = %g A/s of %q", where, s.PeakSlew, lim.MaxSlewAPerS, x.fx.Name)
		}
		w := x.fx.Winding
		if v := w.ResistanceOhm*s.PeakCurrent + w.InductanceH*s.PeakSlew; lim.MaxVoltageV > 0 && v > lim.MaxVoltageV {
			x.c.add(path, "%s needs about %.4g V (R·I + L·dI/dt = %g Ω × %.4g A + %g H × %.4g A/s), above the fixture limit limits.max_voltage_v = %g V of %q",
				where, v, w.ResistanceOhm, s.PeakCurrent, w.InductanceH, s.PeakSlew, lim.MaxVoltageV, x.fx.Name)
		}
	}
	if x.unit == UnitApm && lim.MaxFieldT > 0 {
		if b := units.Mu0 * peak; b > lim.MaxFieldT {
			x.c.add(path, "%s reaches μ0·H = %.4g T, above the fixture limit limits.max_field_t = %g T of %q", where, b, lim.MaxFieldT, x.fx.Name)
		}
	}
}

func (x *expander) step(i int, s StepSpec) {
	key, b, _ := s.kind()
	src := stepPath(i, key)
	x.src = src + "."
	b.expand(x, src)
}

func (x *expander) condition(src, path string, a, rate float64, cycles int) {
	levels := []float64{a}
	for range cycles {
		levels = append(levels, -a, a)
	}
	x.push(Step{Source: src, Kind: KindCondition, Period: x.r.PeriodOr(),
		Segments: x.program(x.level, rate, "", 2*x.r.PeriodOr(), levels...)}, path, rate)
}

// loop is one recorded symmetric loop: approach +A, pre hold, +A → −A → +A, post hold.
func (x *expander) loop(src, path, kind string, amp Level, rate float64, smp Sampling) {
	a := x.lv(amp)
	x.recorded(src, path, LoopInfo{Kind: kind, Amplitude: amp.Value, AmpUnit: amp.Unit}, rate, smp, a, -a, a)
}

// recorded builds a Record step: an unrecorded approach to start, a pre
// hold there, the sweep through levels, and a post hold at the last level.
func (x *expander) recorded(src, path string, info LoopInfo, rate float64, smp Sampling, start float64, levels ...float64) {
	x.recordedAim(src, path, info, rate, smp, nil, start, levels...)
}

// recordedAim is recorded with an optional peak target.
func (x *expander) recordedAim(src, path string, info LoopInfo, rate float64, smp Sampling, aim *Aim, start float64, levels ...float64) {
	// Refuse a ramp beyond MaxSegment, naming the step.
	prev := x.level
	for _, l := range append([]float64{start}, levels...) {
		x.ramp(prev, l, rate)
		prev = l
	}
	segs, per := recordProgram(x.level, start, levels, rate, smp, 2*x.r.PeriodOr())
	st := Step{Source: src, Kind: KindRecord, Period: per, Loop: &info, Segments: segs, Capture: captureOf(smp, per)}
	if aim == nil {
		x.push(st, path, rate)
		return
	}
	// The search may try any amplitude up to Max: the limits are checked
	// for a loop at Max.
	aim.rate, aim.smp, aim.approach, aim.period = rate, smp, 2*x.r.PeriodOr(), x.r.PeriodOr()
	st.Aim = aim
	chk := st
	if !math.IsNaN(aim.Max) {
		chk = st.AtAmplitude(aim.Max, x.level)
	}
	level := x.level
	x.push(chk, path, rate)
	chk = x.out[len(x.out)-1]
	x.out = x.out[:len(x.out)-1]
	x.segs -= len(chk.Segments)
	x.level = level
	x.push(st, "", rate)
	x.out[len(x.out)-1].PeakCurrent, x.out[len(x.out)-1].PeakSlew = chk.PeakCurrent, chk.PeakSlew
}

// Errorf builds a located error for a key of the recipe (for callers that
// refuse a recipe for reasons of their own, e.g. a supply's range).
func (r *Recipe) Errorf(path, format string, args ...any) *configs.Error {
	return r.doc.Errorf(path, format, args...)
}
