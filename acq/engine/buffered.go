package engine

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"
	"time"

	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/acq/safety"
	"hystd/acq/sampler"
	"hystd/calib/units"
	"hystd/drivers/instr"
)

// Buffered capture (recipe capture: buffered).
//
// Sequence of a recorded step: at the start of the pre hold (after the
// integrator's reset) the integrator and, when the fixture has one, the
// field meter are armed for N = 1.25·sweep/buffer_period + 1 readings (a
// quarter more than the planned sweep), one every buffer_period on their
// own time base, and their clocks are read; at the sweep's first round each gets its trigger, before the
// supply's setpoint of that round; the sweep runs at the recipe's setpoint
// period, reading only the supply (and the thermometer) each round,
// *before* its setpoint is changed; the post hold is polled as usual; at
// the end of the step the engine waits for both acquisitions to complete,
// reads the clocks again and fetches both buffers. Readings after the
// sweep's last step are left out.
//
// A late host. Stalled rounds (a busy host, late replies) shift the
// sweep's schedule (exec.step), so a sweep can outlast buffers sized for
// its plan. Before every sweep round, and at the round that ends the
// sweep, the engine checks that the buffers still cover the step being
// sent (their end on its clock, with twice the time base's rate error, at
// least cutMargin setpoint periods ahead). When they do not, it cuts the
// acquisition there: the setpoint stays where it is, the engine waits for
// the buffers to fill, fetches them with their clocks, arms and triggers
// the next acquisition (sized from what is left of the sweep), and holds
// the level until the settled part of its step lies in the new buffers
// (the step is then twice as long as the gap); the schedule shifts by the
// hold, as for a stall. A DC loop is the locus of settled states (common
// practice), so a held level changes nothing but the loop's duration. Each
// acquisition keeps its own trigger and clock readings (the alignment model
// below, per acquisition); a reading of one instrument is interpolated
// from the other's only within one of its acquisitions, never across a
// gap. The run's events name each cut. More than maxCuts cuts in one step
// end the run (the host cannot keep any schedule); so does a sweep that
// still outlasted its buffers. A lab would rather repeat a run than keep a
// loop it cannot trust; the supply is brought to zero as at every ending.
//
// Alignment model. Instrument i takes reading k at instrument time
// L_i + delay + k·period after it received the trigger, L_i being its own
// trigger latency (its profile's buffered.trigger_latency; 0 when none is
// stated) and delay the programmed one. Its clock runs at
// r_i bench seconds per instrument second, estimated from its two clock
// readings (c0 at arming, c1 after the acquisition, each stamped at the
// midpoint of its exchange on the engine's clock: r_i = (b1−b0)/(c1−c0)),
// or taken as 1 ± the profile's clock_accuracy when the profile has no
// clock query. The trigger took effect at T_i: when the profile has
// trigger_time (the instrument reports that instant on its clock, c_T),
// T_i = b0 + r_i·(c_T − c0), within b0's stamp uncertainty and the rate's
// over c_T − c0; otherwise the time the trigger command was written (± its
// transmission time). The write's stamp cannot show a trigger that takes
// effect late (an instrument busy with something else, a serial adapter
// holding the bytes back, a late host's simulated bench): every reading
// would be placed that much early. This is the likely cause of one
// real-time demo's Br 5.6 U off the truth beside two busy CPU loops (the
// simulated bench, on the same loaded host, took the trigger late): the
// mechanism is reproduced on simulated time with the fault late_trigger
// (1.5 ms: Br 9 U off by the write's stamp, 0.3 U by the instrument's
// clock; acq/demo TestLateTriggerPlacedByInstrumentClock). It is not the
// only one: with trigger_time, a real-time run beside two busy loops still
// gave one loop's Br 0.615 ± 0.068 T (truth about 0.651 T) after six holds.
// Another cause: a setpoint stamped before its command is written
// (round.setAt) but applied late, so that readings at the start of a step's
// kept part still belonged to the step before. Measured in real time beside
// two busy loops (load 6–7): of 802 sweep setpoints, the set_current
// exchange (write and error-queue read) ended more than half a step
// (6.25 ms) after its stamp for 140, more than a whole step for 37, up to
// 119 ms. A step whose setpoint exchange ended (round.setDone) after the
// start of its settled part therefore keeps no reading (stepAt); reproduced
// on simulated time in acq/demo TestLateSetpointKeptOutOfItsStep. So reading k is placed at
//
//	t_ik = T_i + r_i·(L_i + delay + k·period)
//
// on the engine's clock. The integrator's times are the samples' times;
// the field meter's buffer is interpolated linearly onto them.
//
// H. The field comes from the supply's measured current, not from the
// programmed ramp: a lab trusts the ammeter over the setpoint (a supply in
// compliance, a slow control loop or a winding that heats all make the
// two differ). The engine steps the supply, so the current is a
// staircase: each round reads the current just before it sets the next
// level, so every reading is the settled level of the step that is ending.
// A buffered reading at time t takes the current of the step it falls in:
// the reading of the first round whose setpoint was sent at or after t
// (the supply's response to a step, which this model ignores, is its
// slew: 3.5 mA at 100 A/s on the demo bench takes 35 µs of a 12.5 ms step).
// The time-uncertainty of each sample is that of the trigger plus the
// rate's over the elapsed time.
//
// Settled readings. A DC loop is the locus of settled states (common
// practice): after each setpoint step the laminations' eddy currents hold
// B back for a few milliseconds, and those readings lie off the
// quasi-static loop (on the demo bench they widen HcB by one step of H,
// 10 A/m). The engine keeps the readings from the middle to nine tenths of
// each step (keepFrom, keepTo; none of a step whose setpoint exchange ended
// after its middle, see stepAt) and leaves out the others, saying how many in
// the run's events; the last tenth is left out because the instant of a
// setpoint change is known only within the supply's own response and the
// stamps' uncertainty. With buffer_period one 30th of the setpoint period
// (the default) that keeps twelve readings a step.
const (
	keepFrom = 0.5
	keepTo   = 0.9
)

// Cutting an acquisition short of the sweep (a late host, see above).
const (
	// cutMargin is how many setpoint periods ahead the buffers must reach.
	cutMargin = 4
	// maxCuts is the most acquisitions after the first in one step.
	maxCuts = 8
)

// bufRole is one buffered instrument and its acquisitions in the step.
type bufRole struct {
	role   string
	dev    instr.Buffered
	chunks []*chunk // the last is the one armed or running
}

// chunk is one acquisition: armed, triggered, fetched.
type chunk struct {
	plan    instr.BufferPlan
	c0, c1  instr.Reading // clock readings (Value in instrument seconds)
	trig    time.Time
	trigUnc time.Duration
	// trigInst is when the trigger took effect on the instrument's clock
	// (instrument seconds), read after the acquisition when the profile
	// can tell it (haveInst).
	trigInst float64
	haveInst bool
	values   []float64
}

func (r *bufRole) cur() *chunk { return r.chunks[len(r.chunks)-1] }

// at is when, on the instrument's clock after the trigger, reading k of
// acquisition a is taken: its trigger latency, the programmed delay and k
// periods.
func (r *bufRole) at(a *chunk, k int) time.Duration {
	return r.dev.BufferTriggerLatency() + a.plan.Delay + time.Duration(k)*a.plan.Period
}

// capture is the buffered capture of one recorded step.
type capture struct {
	x *exec
	// plan is the acquisition to arm next; after merge its Count is the
	// readings of all the step's acquisitions.
	plan   instr.BufferPlan
	period time.Duration // the recipe step's setpoint period
	sweep  time.Duration // planned sweep time
	swept  time.Duration // planned sweep time of the rounds sent so far
	inSwp  bool          // the last round was a sweep round
	cuts   int
	roles  []*bufRole
	supply *sampler.Sampler // reads the supply and thermometer only
	// rounds are the supply readings of the step, each with the time its
	// setpoint was sent (relative to the run's start).
	rounds    []round
	triggered bool
	fetched   bool
	left      int        // readings outside the settled part of their step
	ramp      *rampState // sweep_mode: ramp (nil: steps)
}

type round struct {
	setAt time.Duration // stamped before the setpoint's command is written
	// setDone is when the setpoint's exchange ended (its command written
	// and the error queue read after it): the level changed at some
	// instant in [setAt, setDone].
	setDone time.Duration
	s       record.Sample
	level   float64 // the setpoint sent after the reading
	phase   record.Phase
}

// bufferedOf returns the instrument of a role as instr.Buffered when its
// profile can buffer.
func bufferedOf(r any) (instr.Buffered, bool) {
	if r == nil {
		return nil, false
	}
	b, ok := r.(instr.Buffered)
	return b, ok && b.CanBuffer()
}

// checkCapture refuses, before anything is energised, a buffered step on a
// fixture whose integrator or field meter cannot buffer, or one closed on H.
func checkCapture(s Setup, steps []recipe.Step) error {
	for _, st := range steps {
		if !st.Capture.Buffered {
			continue
		}
		if st.Control == recipe.ControlField {
			return &Refused{s.Recipe.Errorf(st.Source, "step %d (%s): capture: buffered needs control: current (the field loop needs a polled H every period)", st.N, st.Source)}
		}
		in := s.Instruments
		if in.Supply == nil {
			continue // checked again when the instruments are set
		}
		if err := checkRamp(s, st); err != nil {
			return err
		}
		if in.Integrator == nil && in.FieldMeter == nil {
			return &Refused{s.Recipe.Errorf(st.Source, "step %d (%s): capture: buffered needs an integrator or a field meter", st.N, st.Source)}
		}
		for _, role := range []string{"integrator", "field_meter"} {
			r := map[string]any{"integrator": in.Integrator, "field_meter": in.FieldMeter}[role]
			if r == nil {
				continue
			}
			if _, ok := bufferedOf(r); !ok {
				return &Refused{s.Recipe.Errorf(st.Source, "step %d (%s): capture: buffered, but the %s's instrument profile %q has no buffered section (timed acquisition); use capture: polled or a profile with one", st.N, st.Source, role, profileName(s, role))}
			}
		}
	}
	return nil
}

func profileName(s Setup, role string) string {
	if in, ok := s.Fixture.Instruments[role]; ok {
		return in.Profile
	}
	return "?"
}

// newCapture prepares the buffered capture of st; nil when st is polled.
func (x *exec) newCapture(st recipe.Step) (*capture, error) {
	if !st.Capture.Buffered || st.Loop == nil {
		return nil, nil
	}
	var sweep time.Duration
	for _, g := range st.Segments {
		if g.Phase == record.Sweep {
			sweep += g.Dur
		}
	}
	c := &capture{x: x, period: st.Period, sweep: sweep, plan: instr.BufferPlan{Period: st.Capture.Period}}
	c.plan.Count = c.countFor(sweep)
	in := x.s.Instruments
	if in.Integrator != nil {
		if b, ok := bufferedOf(in.Integrator); ok {
			c.roles = append(c.roles, &bufRole{role: "integrator", dev: b})
		}
	}
	if in.FieldMeter != nil {
		if b, ok := bufferedOf(in.FieldMeter); ok {
			c.roles = append(c.roles, &bufRole{role: "field meter", dev: b})
		}
	}
	if len(c.roles) == 0 {
		return nil, &safety.Violation{Limit: "capture", Value: math.NaN(), Text: "capture: buffered, and no instrument can buffer"}
	}
	smp, err := sampler.NewWith(sampler.Roles{Supply: in.Supply, Thermometer: in.Thermometer}, x.start, sampler.Options{Status: true})
	if err != nil {
		return nil, err
	}
	c.supply = smp
	if st.Capture.Ramp {
		c.ramp = newRampState(st, in.Supply)
	}
	return c, nil
}

func (c *capture) close() { c.supply.Close() }

// fail is the violation a buffered-capture fault ends the run with.
func (c *capture) fail(role, format string, args ...any) error {
	return safety.Instrument(role, fmt.Errorf("buffered capture: "+format, args...))
}

// countFor is the readings an acquisition needs to cover d: a quarter
// more than d takes at the buffer period, plus one.
func (c *capture) countFor(d time.Duration) int {
	n := int(d / c.plan.Period)
	return n + n/4 + 1
}

// arm programs and arms every buffered instrument for c.plan (a new
// acquisition) and reads its clock.
func (c *capture) arm(ctx context.Context) error {
	for _, r := range c.roles {
		k := &chunk{plan: c.plan}
		r.chunks = append(r.chunks, k)
		cctx, cancel := context.WithTimeout(ctx, c.x.comm)
		err := r.dev.ArmBuffer(cctx, c.plan)
		if err == nil && r.dev.HasBufferClock() {
			k.c0, err = r.dev.ReadBufferClock(cctx)
		}
		cancel()
		if err != nil {
			return c.fail(r.role, "arm %d readings every %s: %w", c.plan.Count, c.plan.Period, err)
		}
	}
	return nil
}

// trigger starts every armed acquisition.
func (c *capture) trigger(ctx context.Context) error {
	c.triggered = true
	for _, r := range c.roles {
		cctx, cancel := context.WithTimeout(ctx, c.x.comm)
		k := r.cur()
		var err error
		k.trig, k.trigUnc, err = r.dev.TriggerBuffer(cctx)
		cancel()
		if err != nil {
			return c.fail(r.role, "trigger: %w", err)
		}
	}
	return nil
}

// readThenSet reads the supply (and thermometer), then sends the level.
func (c *capture) readThenSet(ctx context.Context, level float64) (sampler.Reading, error) {
	rd, err := c.supply.ReadAll(ctx)
	if err != nil {
		return rd, err
	}
	c.note(rd.Sample, level, record.Sweep)
	if c.ramp != nil {
		return rd, c.ramp.program(ctx, c.x.s.Instruments.Supply)
	}
	if _, err := sampler.Retry(ctx, func(ctx context.Context) (struct{}, error) {
		return struct{}{}, c.x.s.Instruments.Supply.SetCurrent(ctx, units.Ampere(level))
	}); err != nil {
		return rd, &sampler.RoleError{Role: "supply", Err: fmt.Errorf("set current %.6g A: %w", level, err)}
	}
	c.setDone()
	return rd, nil
}

// note keeps a supply reading taken just before the setpoint level is sent.
func (c *capture) note(s record.Sample, level float64, phase record.Phase) {
	at := c.x.s.Clock.Now().Sub(c.x.start)
	c.rounds = append(c.rounds, round{setAt: at, setDone: at, s: s, level: level, phase: phase})
}

// kept is the settled part [from, to) of the step that r's setpoint began
// and next's ended (keepFrom, keepTo); late says r's setpoint exchange
// ended after from, so that the step keeps no reading (stepAt).
func (r round) kept(next round) (from, to time.Duration, late bool) {
	step := next.setAt - r.setAt
	from = r.setAt + time.Duration(keepFrom*float64(step))
	to = r.setAt + time.Duration(keepTo*float64(step))
	return from, to, r.setDone > from
}

// setDone records that the last noted round's setpoint exchange ended now.
func (c *capture) setDone() {
	c.rounds[len(c.rounds)-1].setDone = c.x.s.Clock.Now().Sub(c.x.start)
}

// finish waits for every acquisition to complete, reads the clocks and
// fetches the buffers. An acquisition not complete well after it should
// have ended (a trigger that never came) is an error, as is a buffer that
// is short, garbled or holds a value out of range.
func (c *capture) finish(ctx context.Context) error {
	c.fetched = true
	if err := c.collect(ctx); err != nil {
		return err
	}
	if ig := c.x.s.Instruments.Integrator; ig != nil && c.roles[0].role == "integrator" {
		cctx, cancel := context.WithTimeout(ctx, c.x.comm)
		over, err := ig.Overloaded(cctx)
		cancel()
		if err != nil {
			return c.fail("integrator", "read overload after the acquisition: %w", err)
		}
		if over {
			return &safety.Violation{Limit: "integrator.overload", Value: math.NaN(),
				Text: "the integrator reports overload after the buffered sweep: raise integrator_range_wb"}
		}
	}
	return nil
}

// collect waits for the running acquisition of every role to complete,
// reads the clocks and fetches the buffers.
func (c *capture) collect(ctx context.Context) error {
	for _, r := range c.roles {
		k := r.cur()
		span := time.Duration(float64(r.at(k, k.plan.Count-1)) * 1.01)
		grace := max(time.Second, span/50)
		due := k.trig.Add(span + grace)
		poll := max(k.plan.Period, 20*time.Millisecond)
		for {
			cctx, cancel := context.WithTimeout(ctx, c.x.comm)
			done, err := r.dev.BufferDone(cctx)
			cancel()
			if err != nil {
				return c.fail(r.role, "ask whether the acquisition is complete: %w", err)
			}
			if done {
				break
			}
			if now := c.x.s.Clock.Now(); now.After(due) {
				return c.fail(r.role, "acquisition of %d readings every %s not complete %s after its trigger (it should have taken %s): the trigger did not arrive or the instrument stopped",
					k.plan.Count, k.plan.Period, now.Sub(k.trig).Round(time.Millisecond), span.Round(time.Millisecond))
			}
			if err := c.x.s.Clock.SleepUntil(ctx, c.x.s.Clock.Now().Add(poll)); err != nil {
				return err
			}
		}
		// A real transfer takes 10 bits a byte: allow for it beyond
		// comm_timeout (2 ms a value: 23 bytes of ASCII at 115200 Bd).
		cctx, cancel := context.WithTimeout(ctx, c.x.comm+time.Duration(k.plan.Count)*2*time.Millisecond)
		var err error
		if r.dev.HasBufferClock() {
			k.c1, err = r.dev.ReadBufferClock(cctx)
			if err == nil && r.dev.HasTriggerTime() {
				k.trigInst, err = r.dev.ReadTriggerTime(cctx)
				k.haveInst = err == nil
			}
		}
		if err == nil {
			k.values, err = r.dev.FetchBuffer(cctx, k.plan.Count)
		}
		cancel()
		if err != nil {
			return c.fail(r.role, "fetch %d readings: %w", k.plan.Count, err)
		}
	}
	return nil
}

// end is when the running acquisitions end, at the earliest, on the
// engine's clock: their last reading, with twice the time base's rate error.
func (c *capture) end() time.Time {
	var end time.Time
	for i, r := range c.roles {
		k := r.cur()
		inst := r.at(k, k.plan.Count-1).Seconds()
		e := k.trig.Add(time.Duration(inst * (1 - 2*r.dev.BufferClockAccuracy()) * float64(time.Second)))
		if i == 0 || e.Before(end) {
			end = e
		}
	}
	return end
}

// cut ends the running acquisitions before the sweep does, the setpoint
// held (see "A late host" above), and starts the next; it returns how long
// the level was held.
func (c *capture) cut(ctx context.Context) (time.Duration, error) {
	clk := c.x.s.Clock
	t0 := clk.Now()
	if c.cuts == maxCuts {
		return 0, c.fail(c.roles[0].role, "the sweep fell behind its schedule again after %d acquisitions: the host cannot keep the setpoint period %s; run it on a less loaded computer, or use a longer period or capture: polled",
			maxCuts+1, c.period)
	}
	c.cuts++
	sup := c.x.s.Instruments.Supply
	if c.ramp != nil { // stop the ramp where it is while the buffers are fetched
		if err := c.ramp.hold(ctx, sup, c.rounds[len(c.rounds)-1].s.I, c.period); err != nil {
			return 0, err
		}
	}
	if err := c.collect(ctx); err != nil {
		return 0, err
	}
	// The level held is that of the last round: its step started then.
	s0 := c.x.start.Add(c.rounds[len(c.rounds)-1].setAt)
	gap := clk.Now().Sub(s0)
	c.plan.Count = c.countFor(max(0, c.sweep-c.swept) + 2*gap + (cutMargin+2)*c.period)
	if err := c.arm(ctx); err != nil {
		return 0, err
	}
	if err := c.trigger(ctx); err != nil {
		return 0, err
	}
	// The settled part of the held step, from its middle on, lies in the
	// new buffers when the step lasts twice the time to the last trigger.
	var trig time.Time
	for _, r := range c.roles {
		if t := r.cur().trig; t.After(trig) {
			trig = t
		}
	}
	until := trig.Add(trig.Sub(s0) + c.period)
	if err := clk.SleepUntil(ctx, until); err != nil {
		return 0, err
	}
	if c.ramp != nil {
		if err := c.ramp.resume(ctx, sup); err != nil {
			return 0, err
		}
	}
	held := clk.Now().Sub(t0)
	c.x.event(ctx, "warn", "buffered capture: the sweep fell behind its schedule (a late host or late replies) and its buffers would end before it; the setpoint was held %s at %.6g A while %d readings were fetched from the %s and a new acquisition of %d was started",
		held.Round(time.Millisecond), c.rounds[len(c.rounds)-1].level, c.roles[0].cur().plan.Count, c.names(), c.plan.Count)
	return held, nil
}

// times places each reading of one acquisition of r on the engine's
// clock, relative to the run's start (the alignment model above), with
// each time's uncertainty.
func (c *capture) times(r *bufRole, a *chunk) ([]time.Duration, []time.Duration) {
	rate, rateU := 1.0, r.dev.BufferClockAccuracy()
	if r.dev.HasBufferClock() {
		db := a.c1.At.Sub(a.c0.At).Seconds()
		dc := a.c1.Value - a.c0.Value
		if db > 0 && dc > 0 {
			rate = db / dc
			rateU = (a.c0.AtUncertainty + a.c1.AtUncertainty).Seconds() / db
		}
	}
	ts := make([]time.Duration, len(a.values))
	us := make([]time.Duration, len(a.values))
	base, baseU := a.trig.Sub(c.x.start), a.trigUnc
	if a.haveInst {
		// The trigger's own instant, by the instrument's clock mapped
		// through its first reading: no lag between the command's write
		// and its effect (a busy instrument, an adapter holding bytes back)
		// can hide in it.
		since := a.trigInst - a.c0.Value
		base = a.c0.At.Sub(c.x.start) + time.Duration(rate*since*float64(time.Second))
		baseU = a.c0.AtUncertainty + time.Duration(rateU*math.Abs(since)*float64(time.Second))
	}
	for k := range a.values {
		inst := r.at(a, k).Seconds()
		ts[k] = base + time.Duration(rate*inst*float64(time.Second))
		us[k] = baseU + time.Duration(rateU*inst*float64(time.Second))
	}
	return ts, us
}

// samples builds the sweep's samples from the buffers and the supply
// readings: one per reading of the first buffered instrument.
func (c *capture) samples() ([]record.Sample, error) {
	if !c.fetched || len(c.rounds) == 0 {
		return nil, errors.New("buffered capture: the sweep ended before its buffers were fetched")
	}
	main := c.roles[0]
	var ts, us []time.Duration
	var vs []float64
	for _, a := range main.chunks {
		t, u := c.times(main, a)
		ts, us, vs = append(ts, t...), append(us, u...), append(vs, a.values...)
	}
	// The sweep's last step ends at the first setpoint after it.
	for i, r := range c.rounds {
		if r.phase == record.Sweep && i+1 < len(c.rounds) && c.rounds[i+1].phase != record.Sweep {
			if end := c.rounds[i+1].setAt; len(ts) == 0 || ts[len(ts)-1] < end {
				return nil, c.fail(main.role, "the sweep lasted until %s, beyond its %d readings (to %s): it stalled after its buffers were last armed; use a longer buffer_period or capture: polled",
					end.Round(time.Millisecond), len(ts), ts[len(ts)-1].Round(time.Millisecond))
			}
			break
		}
	}
	// The other instrument's acquisitions, each interpolated within itself.
	type span struct {
		ts []time.Duration
		vs []float64
	}
	var other []span
	if len(c.roles) > 1 {
		for _, a := range c.roles[1].chunks {
			t, _ := c.times(c.roles[1], a)
			other = append(other, span{t, a.values})
		}
	}
	nan := math.NaN()
	out := make([]record.Sample, 0, len(ts))
	supplyAt := c.stepAt
	if c.ramp != nil {
		supplyAt = c.rampAt
	}
	for k, t := range ts {
		s, ok := supplyAt(t, us[k])
		if !ok {
			c.left++
			continue
		}
		s.Psi, s.BProbe = nan, nan
		if main.role == "integrator" {
			s.Psi = vs[k]
			if other != nil {
				i := sort.Search(len(other), func(i int) bool { return other[i].ts[len(other[i].ts)-1] >= t })
				if i == len(other) || other[i].ts[0] > t {
					c.left++ // between two of the field meter's acquisitions
					continue
				}
				s.BProbe = interp(other[i].ts, other[i].vs, t)
			}
		} else {
			s.BProbe = vs[k]
		}
		out = append(out, s)
	}
	return out, nil
}

// stepAt is the supply's side of a buffered reading at t (time
// uncertainty u) on a stepped sweep: the current read at the end of the
// step the reading falls in, when it falls in the settled part of that
// step (keepFrom, keepTo); ok is false otherwise. A step whose setpoint
// exchange ended (setDone) after the start of its settled part keeps no
// reading: a host late between the setpoint's stamp and its command's
// write (or a supply slow to take it) changed the level that much later,
// so the readings of the settled part may still belong to the step before
// or to a level not yet settled.
func (c *capture) stepAt(t, u time.Duration) (record.Sample, bool) {
	j := sort.Search(len(c.rounds), func(i int) bool { return c.rounds[i].setAt >= t })
	if j == len(c.rounds) || j == 0 || c.rounds[j-1].phase != record.Sweep {
		return record.Sample{}, false
	}
	from, to, late := c.rounds[j-1].kept(c.rounds[j])
	if late || t < from || t >= to {
		return record.Sample{}, false
	}
	rd := c.rounds[j]
	return record.Sample{T: t, TUnc: max(u, rd.s.TUnc), Phase: record.Sweep, I: rd.s.I, V: rd.s.V, TempC: rd.s.TempC,
		Setpoint: c.rounds[j-1].level}, true // the level of the step the reading falls in
}

// lateSteps counts the sweep steps whose setpoint exchange ended after the
// start of their settled part (stepAt keeps none of their readings), and
// the sweep steps in all.
func (c *capture) lateSteps() (late, all int) {
	for j := 1; j < len(c.rounds); j++ {
		r := c.rounds[j-1]
		if r.phase != record.Sweep {
			continue
		}
		all++
		if _, _, slow := r.kept(c.rounds[j]); slow {
			late++
		}
	}
	return late, all
}

// interp is the linear interpolation of vs (at ascending times ts) at t,
// held at the ends.
func interp(ts []time.Duration, vs []float64, t time.Duration) float64 {
	i := sort.Search(len(ts), func(i int) bool { return ts[i] >= t })
	switch {
	case i == 0:
		return vs[0]
	case i == len(ts):
		return vs[len(vs)-1]
	}
	f := float64(t-ts[i-1]) / float64(ts[i]-ts[i-1])
	return vs[i-1] + f*(vs[i]-vs[i-1])
}

// round is called at the start of every round of a buffered step, before
// its reading: it triggers at the sweep's first round; at every later
// sweep round, and at the round that ends the sweep, it cuts the
// acquisition when the buffers would not cover the step about to be sent
// (see "A late host"). It returns how long it held the setpoint, by which
// the step's schedule shifts.
func (c *capture) round(ctx context.Context, phase record.Phase) (time.Duration, error) {
	sweep := phase == record.Sweep
	defer func() {
		if sweep {
			c.swept += c.period
		}
		c.inSwp = sweep
	}()
	if !c.triggered && (sweep || c.ramp != nil && c.ramp.sweepNext(c.period)) {
		// A ramp starts right after the sweep's first reading, and an
		// instrument's first reading comes its trigger latency after its
		// trigger: a ramped sweep is triggered one round early, so that
		// its first instants (a tip) are sampled.
		return 0, c.trigger(ctx)
	}
	if !c.triggered || c.fetched || !(sweep || c.inSwp) {
		return 0, nil
	}
	ahead := time.Duration(cutMargin) * c.period
	if !sweep {
		ahead = c.period // the sweep's last step ends with this round
	}
	if c.end().Before(c.x.s.Clock.Now().Add(ahead)) {
		return c.cut(ctx)
	}
	return 0, nil
}

// merge replaces the sweep's polled samples of raw (supply readings only)
// with the buffered samples.
func (c *capture) merge(ctx context.Context, raw []record.Sample) ([]record.Sample, error) {
	if c.triggered && !c.fetched {
		if err := c.finish(ctx); err != nil {
			return nil, err
		}
	}
	buf, err := c.samples()
	if err != nil {
		return nil, err
	}
	c.plan.Count = 0
	for _, a := range c.roles[0].chunks {
		c.plan.Count += a.plan.Count
	}
	out := make([]record.Sample, 0, len(raw)+len(buf))
	for _, s := range raw {
		if s.Phase != record.Sweep {
			out = append(out, s)
		}
	}
	out = append(out, buf...)
	sort.SliceStable(out, func(i, j int) bool { return out[i].T < out[j].T })
	return out, nil
}

// names lists the buffered roles.
func (c *capture) names() string {
	var ns []string
	for _, r := range c.roles {
		ns = append(ns, r.role)
	}
	return strings.Join(ns, " and ")
}
