package engine

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"strings"
	"sync/atomic"
	"time"

	"hystd/acq/config"
	"hystd/acq/live"
	"hystd/acq/process"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/acq/safety"
	"hystd/acq/sampler"
	"hystd/calib/units"
	"hystd/drivers/clock"
	"hystd/drivers/instr"
)

// Timeouts of the engine's own bookkeeping, independent of the run's context.
const (
	// DefaultCommTimeout bounds one sample round when the fixture names no comm_timeout.
	DefaultCommTimeout = 2 * time.Second
	// WriteTimeout bounds one store call.
	WriteTimeout = 30 * time.Second
	// HaltMargin is added to the ramp-down time |I|/slew when bounding Halt.
	HaltMargin = 15 * time.Second
	// progressEvery is the spacing of progress events within a step.
	progressEvery = 500 * time.Millisecond
	// unreachableAfter ends a closed-loop run whose current has sat at the
	// fixture's limit this long without reaching the field setpoint.
	unreachableAfter = time.Second
	// fieldCorrection is the fraction of the field error corrected per period.
	fieldCorrection = 0.5
)

type exec struct {
	p      *Plan
	s      Setup
	log    *slog.Logger
	check  *safety.Checker
	start  time.Time
	comm   time.Duration
	loopN  int
	done   time.Duration // planned time of the steps before the current one
	energd bool          // output turned on by this run
	lastI  float64       // last current read back, A
	lastH  float64       // last measured H, A/m
	icmd   float64       // commanded current in closed loop, A
	pinned time.Duration // time the closed-loop current has sat at the limit
	// lastLevel is the previous closed-loop setpoint, A/m.
	lastLevel float64
	haveLevel bool
	failed    []record.Loop        // loops the writer refused
	retries   atomic.Int64         // late replies read again in the current step
	smp       *sampler.Sampler     // the run's concurrent reader
	notes     []string             // added to the final reason
	polled    map[string]time.Time // last error-queue poll, by role
	tryRaw    *[]record.Sample     // not nil: a loop is a try of a peak search, kept here instead of stored
	lines     map[string]lineCount // port reconnects and broken exchanges by role when the run started
}

func newExec(p *Plan) *exec {
	comm := p.s.Fixture.Limits.CommTimeout.D()
	if comm <= 0 {
		comm = DefaultCommTimeout
	}
	if clock.IsSimulated(p.s.Clock) {
		comm = max(comm, SimCommTimeout)
	}
	return &exec{p: p, s: p.s, log: p.s.Log.With("run", p.run.ID, "fixture", p.run.Fixture),
		check: safety.NewChecker(safety.LimitsOf(p.s.Fixture)), comm: comm}
}

// bg returns a context that outlives ctx's cancellation, bounded by d: for
// the halt and the record, which must happen after an abort too.
func bg(ctx context.Context, d time.Duration) (context.Context, context.CancelFunc) {
	return context.WithTimeout(context.WithoutCancel(ctx), d)
}

func (x *exec) event(ctx context.Context, level, format string, args ...any) {
	text := fmt.Sprintf(format, args...)
	switch level {
	case "error":
		x.log.Error(text)
	case "warn":
		x.log.Warn(text)
	default:
		x.log.Info(text)
	}
	wctx, cancel := bg(ctx, WriteTimeout)
	defer cancel()
	if err := x.s.Writer.AddEvent(wctx, record.Event{RunID: x.p.run.ID, At: x.s.Clock.Now(), Level: level, Text: text}); err != nil {
		x.log.Error("event not stored", "err", err, "text", text)
	}
}

func (x *exec) setState(ctx context.Context, st record.State, reason string, at time.Time) {
	wctx, cancel := bg(ctx, WriteTimeout)
	defer cancel()
	if err := x.s.Writer.SetState(wctx, x.p.run.ID, st, reason, at); err != nil {
		x.log.Error("run state not stored", "state", st, "reason", reason, "err", err)
		x.notes = append(x.notes, fmt.Sprintf("state %s not stored: %v", st, err))
	}
	x.p.publish(live.Event{Kind: live.KindState, State: st, Reason: reason, At: at})
}

// steps runs the whole plan; its error says why it stopped early.
func (x *exec) steps(ctx context.Context) error {
	x.start = x.s.Clock.Now()
	x.p.run.State, x.p.run.Started = record.Running, x.start
	x.setState(ctx, record.Running, "", x.start)
	sup := x.s.Instruments.Supply
	in := x.s.Instruments
	smp, err := sampler.NewWith(in, x.start, sampler.Options{Status: true})
	if err != nil {
		return err
	}
	x.smp = smp
	x.lines = x.lineCounts()

	// A supply found energised is brought to zero before anything else.
	cctx, cancel := context.WithTimeout(ctx, x.comm)
	st, err := sup.Status(cctx)
	cancel()
	if err != nil {
		return safety.Comm("supply", fmt.Errorf("read status: %w", err))
	}
	if st.Tripped {
		// Turning the output on would be refused: say why, and what clears it.
		return safety.Tripped(st)
	}
	if st.OutputOn {
		x.event(ctx, "warn", "supply found with its output on: ramping it to zero before the run starts")
		if err := x.halt(ctx); err != nil {
			return fmt.Errorf("supply found on and could not be brought to zero: %w", err)
		}
	}

	if rg := x.s.Recipe.IntegratorRange; rg > 0 && x.s.Instruments.Integrator != nil {
		cctx, cancel := context.WithTimeout(ctx, x.comm)
		err := x.s.Instruments.Integrator.SetRange(cctx, units.WeberTurn(rg))
		cancel()
		if err != nil {
			return safety.Comm("integrator", fmt.Errorf("set range %g Wb-turns: %w", rg, err))
		}
	}
	peak := 0.0
	for _, s := range x.p.Steps {
		if !math.IsNaN(s.PeakCurrent) {
			peak = math.Max(peak, s.PeakCurrent)
		} else {
			peak = math.Max(peak, x.s.Fixture.Limits.MaxCurrentA)
		}
	}
	x.event(ctx, "warn", "%s", Caution(x.s.Fixture, peak))
	x.identities(ctx)

	cctx, cancel = context.WithTimeout(ctx, x.comm)
	err = sup.SetCurrent(cctx, 0)
	if err == nil {
		x.energd = true // from here on the output may be on
		err = sup.SetOutput(cctx, true)
	}
	cancel()
	if err != nil {
		return safety.Comm("supply", fmt.Errorf("turn output on: %w", err))
	}
	for i := range x.p.Steps {
		run := x.step
		if x.p.Steps[i].Aim != nil {
			run = x.aimed
		}
		if err := run(ctx, x.p.Steps[i]); err != nil {
			return err
		}
		x.done += x.p.Steps[i].Duration()
	}
	return nil
}

// hOf is the measured H of a sample: from the current on a closed circuit,
// from the probe beside the specimen otherwise.
func (x *exec) hOf(s record.Sample) float64 {
	if x.s.Fixture.HFrom == "current" {
		if r := x.s.Geometry.AmperePerAm(); r > 0 {
			return s.I / r
		}
		return math.NaN()
	}
	return s.BProbe / units.Mu0
}

// command returns the current to set for the level of a step.
func (x *exec) command(st recipe.Step, level float64) (float64, error) {
	if st.Control != recipe.ControlField {
		return level, nil
	}
	h := x.lastH
	if math.IsNaN(h) {
		return 0, &safety.Violation{Limit: "h_from", Value: math.NaN(), Text: "control: field needs a measured H, and none was read"}
	}
	// Feed the setpoint's change forward and correct half the last error:
	// with the exact gain the first term alone tracks a ramp; the second
	// removes what the gain or the specimen's curvature leave, without the
	// overshoot a full correction of a lagging reading would give.
	prev := x.lastLevel
	if !x.haveLevel {
		prev = h
	}
	i := x.icmd + st.FieldGain*(level-prev) + fieldCorrection*st.FieldGain*(prev-h)
	x.lastLevel, x.haveLevel = level, true
	step := x.s.Fixture.Limits.MaxSlewAPerS * st.Period.Seconds()
	if step > 0 {
		i = math.Max(x.icmd-step, math.Min(x.icmd+step, i))
	}
	pinned := false
	if m := x.s.Fixture.Limits.MaxCurrentA; m > 0 && math.Abs(i) > m {
		i = math.Copysign(m, i)
		pinned = true
	}
	if pinned {
		x.pinned += st.Period
		if x.pinned >= unreachableAfter {
			return 0, &safety.Violation{Limit: "limits.max_current_a", Value: i, Max: x.s.Fixture.Limits.MaxCurrentA, Unit: "A",
				Text: fmt.Sprintf("field setpoint %.4g A/m not reached (measured %.4g A/m) with the current at the fixture limit limits.max_current_a = %g A", level, h, x.s.Fixture.Limits.MaxCurrentA)}
		}
	} else {
		x.pinned = 0
	}
	x.icmd = i
	return i, nil
}

// step runs one recipe step round by round on its schedule, then ends it
// (endStep).
func (x *exec) step(ctx context.Context, st recipe.Step) error {
	n := len(x.p.Steps)
	x.event(ctx, "info", "step %d/%d %s (%s) started, planned %s", st.N, n, st.Kind, st.Source, st.Duration())
	x.progress(st, 0)
	var raw, drift []record.Sample
	var loopStart time.Time
	stepStart := x.s.Clock.Now()
	lastProgress := stepStart
	prevPhase := record.Phase("")
	cpt, err := x.newCapture(st)
	if err != nil {
		return err
	}
	if cpt != nil {
		defer cpt.close()
	}
	// The step's schedule: round k sets the level of t = k·period, due at
	// stepStart+shift+t. A round that comes late by half a period or more
	// (a stalled reply, a retry, a slow host) shifts the rest of the
	// schedule by its lateness: the sweep resumes where it stopped, one
	// recipe step further, never several at once (a jump the supply would
	// follow at its own slew, beyond limits.max_slew_a_per_s).
	var shift, stalled time.Duration
	stalls := 0
	for k := time.Duration(0); ; k++ {
		now := x.s.Clock.Now()
		t := k * st.Period
		if late := now.Sub(stepStart.Add(shift + t)); k > 0 && late >= st.Period/2 {
			shift += late
			stalled += late
			stalls++
		}
		level, phase, done := st.At(t)
		if st.Loop != nil && phase == record.PreHold && prevPhase != record.PreHold {
			loopStart = now
			if err := x.startLoop(ctx, cpt); err != nil {
				return err
			}
		}
		prevPhase = phase
		if cpt != nil {
			cpt.beforeRound(t, x.polled)
		}
		set, err := x.command(st, level)
		if err != nil {
			return err
		}
		rd, held, err := x.readRound(ctx, cpt, phase, set)
		shift += held // a buffered capture held the level to re-arm
		if err != nil {
			return err
		}
		s := rd.Sample
		s.Phase, s.Setpoint = phase, level
		x.lastI, x.lastH = s.I, x.hOf(s)
		// The checks on I and V (slew, resistance) go by the current's own time.
		if v := x.check.Check(safety.Observation{T: s.T + s.DtI, TUnc: s.TUnc, I: s.I, V: s.V, BProbe: s.BProbe, TempC: s.TempC,
			Status: rd.Status, HaveStatus: true, Energised: x.energd, Overload: rd.Overload}); v != nil {
			return v
		}
		if err := x.pollErrors(ctx, now, false); err != nil {
			return err
		}
		if st.Loop != nil && phase != "" {
			raw = append(raw, s)
			x.liveSample(s, x.loopN+1)
		} else {
			x.liveSample(s, 0) // demagnetize, condition, approach, return: shown live too
		}
		if st.Kind == recipe.KindDriftHold && phase == record.PreHold {
			drift = append(drift, s)
		}
		if now.Sub(lastProgress) >= progressEvery {
			lastProgress = now
			x.progress(st, t)
		}
		if done {
			break
		}
		if err := x.s.Clock.SleepUntil(ctx, stepStart.Add(shift+t+st.Period)); err != nil {
			return err
		}
	}
	x.stepWarnings(ctx, st, stalls, stalled)
	return x.endStep(ctx, st, cpt, raw, drift, loopStart)
}

// startLoop zeroes the integrator (the field is static) and arms a
// buffered capture (cpt, when not nil) at the start of a loop's pre-hold.
func (x *exec) startLoop(ctx context.Context, cpt *capture) error {
	in := x.s.Instruments
	if in.Integrator != nil { // the field is static: zero the integrator
		cctx, cancel := context.WithTimeout(ctx, x.comm)
		err := in.Integrator.Reset(cctx)
		cancel()
		if err != nil {
			return x.stopErr(ctx, safety.Comm("integrator", fmt.Errorf("reset: %w", err)))
		}
	}
	if cpt != nil {
		if err := cpt.arm(ctx); err != nil {
			return x.stopErr(ctx, err)
		}
	}
	return nil
}

// readRound sets the supply to set and reads the instruments once: in that
// order when polled, the other way round in the sweep of a buffered capture
// (cpt, when not nil). held is how long a buffered capture held the level
// to fetch and re-arm (0 otherwise): the schedule shifts by it.
func (x *exec) readRound(ctx context.Context, cpt *capture, phase record.Phase, set float64) (sampler.Reading, time.Duration, error) {
	in := x.s.Instruments
	var held time.Duration
	if cpt != nil {
		var err error
		if held, err = cpt.round(ctx, phase); err != nil {
			return sampler.Reading{}, held, x.stopErr(ctx, err)
		}
	}
	cctx, cancel := context.WithTimeout(sampler.WithRetryCounter(ctx, &x.retries), x.comm)
	var rd sampler.Reading
	var err error
	if cpt != nil && phase == record.Sweep {
		rd, err = cpt.readThenSet(cctx, set)
	} else {
		if cpt != nil && cpt.ramp != nil {
			err = cpt.ramp.end(cctx) // the sweep is over: setpoints apply at once again
		}
		if err == nil {
			rd, err = setThenRead(cctx, in.Supply, x.smp, set)
		}
		if cpt != nil && err == nil {
			cpt.note(rd.Sample, set, phase)
		}
	}
	cancel()
	if err != nil {
		return sampler.Reading{}, held, x.stopErr(ctx, violationOf(err))
	}
	return rd, held, nil
}

// stepWarnings records the stalled rounds of step st and the late replies
// read again during it.
func (x *exec) stepWarnings(ctx context.Context, st recipe.Step, stalls int, stalled time.Duration) {
	if stalls > 0 {
		x.event(ctx, "warn", "step %d: %d stalled rounds (%s in all): the sweep waited and resumed where it stopped",
			st.N, stalls, stalled.Round(time.Millisecond))
	}
	if n := x.retries.Swap(0); n > 0 {
		x.event(ctx, "warn", "step %d: %d late replies were read again within limits.comm_timeout", st.N, n)
	}
}

// endStep completes step st once its last round is read: merges a buffered
// capture's readings into raw, stores the loop, and records the drift rate
// of a drift hold.
func (x *exec) endStep(ctx context.Context, st recipe.Step, cpt *capture, raw, drift []record.Sample, loopStart time.Time) error {
	if cpt != nil {
		var err error
		if raw, err = cpt.merge(ctx, raw); err != nil {
			return x.stopErr(ctx, err)
		}
		x.event(ctx, "info", "step %d: buffered capture, %d readings every %s on each of %s; %d kept, %d outside the settled part of their setpoint step left out",
			st.N, cpt.plan.Count, cpt.plan.Period, cpt.names(), cpt.plan.Count-cpt.left, cpt.left)
		if late, all := cpt.lateSteps(); late > 0 && cpt.ramp == nil {
			x.event(ctx, "warn", "step %d: %d of %d setpoints reached the supply after the middle of their step (the computer was late between a setpoint's time and its command); none of those steps' readings were kept",
				st.N, late, all)
		}
	}
	if st.Loop != nil {
		x.storeLoop(ctx, st, raw, loopStart)
	}
	if len(drift) > 1 && x.s.Instruments.Integrator != nil {
		rate, ok := slope(drift)
		if ok {
			x.event(ctx, "info", "drift hold (%s): integrator drift %.4g Wb-turns/s over %s", st.Source, rate, drift[len(drift)-1].T-drift[0].T)
		}
	}
	return nil
}

// stopErr prefers the context's ending over an I/O error it caused.
func (x *exec) stopErr(ctx context.Context, err error) error {
	if ctx.Err() != nil {
		return ctx.Err()
	}
	return err
}

func (x *exec) progress(st recipe.Step, t time.Duration) {
	frac := 1.0
	if x.p.total > 0 {
		frac = math.Min(1, float64(x.done+min(t, st.Duration()))/float64(x.p.total))
	}
	x.p.publish(live.Event{Kind: live.KindProgress, Step: st.N, Steps: len(x.p.Steps),
		StepName: fmt.Sprintf("%s (%s)", st.Kind, st.Source), Fraction: frac})
}

// liveSample publishes s as a live sample of loop n (0: a step that records
// no loop).
func (x *exec) liveSample(s record.Sample, n int) {
	if x.s.Live == nil {
		return
	}
	b := 0.0
	if a := float64(x.s.Area); a > 0 && x.s.Fixture.Winding.N2 > 0 {
		b = s.Psi / (float64(x.s.Fixture.Winding.N2) * a)
	}
	x.p.publish(live.Event{Kind: live.KindSample, Loop: n, T: s.T.Seconds(),
		H: finite(x.hOf(s)), B: finite(b), I: finite(s.I)})
}

// slope is the least-squares dψ/dt of samples, Wb-turns/s.
func slope(ss []record.Sample) (float64, bool) {
	var n, st, sp, stt, stp float64
	for _, s := range ss {
		if math.IsNaN(s.Psi) {
			continue
		}
		t := s.T.Seconds()
		n++
		st += t
		sp += s.Psi
		stt += t * t
		stp += t * s.Psi
	}
	d := n*stt - st*st
	if n < 2 || d == 0 {
		return 0, false
	}
	return (n*stp - st*sp) / d, true
}

// storeLoop processes and commits one completed loop; a loop the writer
// refuses is kept for a retry at the end of the run.
func (x *exec) storeLoop(ctx context.Context, st recipe.Step, raw []record.Sample, started time.Time) {
	if x.tryRaw != nil {
		*x.tryRaw = raw
		return
	}
	x.loopN++
	l := record.Loop{RunID: x.p.run.ID, N: x.loopN, Kind: st.Loop.Kind, Amplitude: st.Loop.Amplitude,
		AmpUnit: st.Loop.AmpUnit, Started: started, Raw: raw, Ramped: st.Capture.Ramp}
	if x.s.Process == nil {
		x.event(ctx, "warn", "loop %d stored raw only: no processing configured", l.N)
	} else if pr, err := x.s.Process(raw, loopInfo(st)); err != nil {
		x.event(ctx, "warn", "loop %d stored raw only: processing failed: %v", l.N, err)
	} else {
		l.Points, l.Figures, l.Corrections = pr.Points, pr.Figures, pr.Corrections
		if st.Aim != nil {
			l.Figures = append(l.Figures, aimFigures(st)...)
		}
		// Stored all the same (the raw samples are right), but flagged.
		for _, f := range process.Implausible(l) {
			x.event(ctx, "warn", "loop %d: %s", l.N, f)
		}
	}
	wctx, cancel := bg(ctx, WriteTimeout)
	defer cancel()
	if err := x.s.Writer.AddLoop(wctx, l); err != nil {
		x.log.Error("loop not committed; kept for a retry", "loop", l.N, "err", err)
		x.failed = append(x.failed, l)
		return
	}
	x.event(ctx, "info", "loop %d (%s, %d samples) committed", l.N, l.Kind, len(raw))
}

// loopInfo is what the processor is told of the loop of step st.
func loopInfo(st recipe.Step) process.LoopInfo {
	li := *st.Loop
	li.Ramped = st.Capture.Ramp
	return li
}

// end halts the instruments, retries refused loops, records the final state
// and returns the run.
func (x *exec) end(ctx context.Context, err error) (record.Run, error) {
	state, reason := classify(ctx, err)
	if x.smp != nil {
		x.smp.Close() // no Read is pending: the steps have returned
	}
	if n := x.retries.Swap(0); n > 0 {
		x.event(ctx, "warn", "%d late replies were read again within limits.comm_timeout in the step under way", n)
	}
	herr := x.halt(ctx)
	// A last look at the error queues (the instruments are idle now): an
	// error raised since the last poll is not left for the next open's
	// *CLS to erase.
	if x.start != (time.Time{}) {
		pctx, cancel := bg(ctx, x.comm*4)
		perr := x.pollErrors(pctx, x.s.Clock.Now(), true)
		cancel()
		var v *safety.Violation
		if perr != nil && state == record.Finished && errors.As(perr, &v) && strings.HasPrefix(v.Limit, "instrument.") {
			state, reason = record.Failed, v.Text
		} else if perr != nil {
			x.event(ctx, "warn", "last error-queue poll after the ramp-down: %v", perr)
		}
	}
	// A trip while the run was failing for another reason is named too.
	if x.start != (time.Time{}) && !strings.Contains(reason, "tripped") {
		sctx, cancel := bg(ctx, x.comm)
		if st, err := x.s.Instruments.Supply.Status(sctx); err == nil && st.Tripped {
			x.notes = append(x.notes, safety.Tripped(st).Text)
			state = record.Failed
		}
		cancel()
	}
	// A port lost and reconnected, or an exchange broken off, during the
	// run (up to and with the ramp-down, the last poll and the trip
	// check) is named, also
	// when the operation that met it was retried unseen or failed while
	// the run was already failing on another instrument.
	if x.lines != nil {
		now := x.lineCounts()
		for _, m := range x.s.Instruments.Members() {
			role := instr.RoleLabel(m.Role)
			if n := now[role].reconnects - x.lines[role].reconnects; n > 0 {
				x.event(ctx, "warn", "the %s's port was lost (hang-up or unplug) and reconnected %d time(s) during the run", role, n)
			}
			if n := now[role].breaks - x.lines[role].breaks; n > 0 {
				x.event(ctx, "warn", "the %s's line broke off %d exchange(s) during the run (a reply lost, late or spoiled, or a call cut short); the line is resynchronised before the next", role, n)
			}
		}
	}
	if herr != nil {
		state = record.Failed
		x.notes = append(x.notes, fmt.Sprintf("RAMP-DOWN FAILED: %v — the winding may still carry current; bring the supply to zero by hand before touching the fixture", herr))
	} else {
		x.event(ctx, "info", "supply at zero, output off (read back %.4g A)", x.lastI)
	}
	for _, l := range x.failed {
		wctx, cancel := bg(ctx, WriteTimeout)
		werr := x.s.Writer.AddLoop(wctx, l)
		cancel()
		if werr == nil {
			continue
		}
		file, serr := spool(x.s.SpoolDir, l)
		if serr != nil {
			x.notes = append(x.notes, fmt.Sprintf("loop %d not committed (%v) and not spooled (%v)", l.N, werr, serr))
		} else {
			x.notes = append(x.notes, fmt.Sprintf("loop %d not committed (%v): kept in %s", l.N, werr, file))
		}
		state = record.Failed
	}
	if len(x.notes) > 0 {
		reason = strings.TrimPrefix(reason+"; "+strings.Join(x.notes, "; "), "; ")
	}
	at := x.s.Clock.Now()
	level := "info"
	if state != record.Finished {
		level = "error"
		if state == record.Aborted {
			level = "warn"
		}
	}
	x.event(ctx, level, "%s", endingText(state, at.Sub(x.start), reason))
	x.setState(ctx, state, reason, at)
	x.p.run.State, x.p.run.Reason, x.p.run.Ended = state, reason, at
	if state == record.Finished {
		return x.p.run, nil
	}
	return x.p.run, &Stop{State: state, Reason: reason}
}

// endingText is the run's last log line: how it ended, after how long, and
// why when it did not simply finish ("run finished normally after 2m29.6s: every step done",
// "run aborted after 12.3s: SIGTERM received").
func endingText(state record.State, d time.Duration, reason string) string {
	d = d.Round(100 * time.Millisecond)
	if reason == "" {
		if state == record.Finished {
			return fmt.Sprintf("run finished normally after %s: every step done", d)
		}
		return fmt.Sprintf("run %s after %s (no reason recorded)", state, d)
	}
	return fmt.Sprintf("run %s after %s: %s", state, d, reason)
}

// zeroTol is the read-back current taken as zero, A: 5 mA + 0.2 % of the
// fixture's max current.
func zeroTol(fx config.Fixture) float64 { return 0.005 + 0.002*fx.Limits.MaxCurrentA }

// SafeHalt brings a fixture's supply to zero and its output off the safe
// way, as every run's ending does: a programmed ramp ended (instr.Ramper),
// then the supply's Halt (instr.Supply's
// contract: ramp to zero at its slew limit — profile.Supply uses the lower of
// the profile's and the fixture's, acq/fixture passes the fixture's — wait
// for the read-back near zero, then output off), tried twice if it fails,
// then the other roles halted, then the read-back checked against
// 2·zeroTol. The ramp-down is the driver's alone: one mechanism, the one
// that knows every setpoint it sent. lastI (A, NaN: unknown) sizes the time
// bound. It uses a context of its own derived from ctx without its
// cancellation, so it also works after an abort.
func SafeHalt(ctx context.Context, in Instruments, fx config.Fixture, lastI float64, log *slog.Logger) (float64, error) {
	return safeHalt(ctx, in, fx, lastI, log, nil)
}

// safeHalt is SafeHalt telling note (when not nil) what went wrong on the
// way, also when the second attempt succeeded: for the run's events.
func safeHalt(ctx context.Context, in Instruments, fx config.Fixture, lastI float64, log *slog.Logger, note func(string)) (float64, error) {
	if note == nil {
		note = func(string) {}
	}
	if log == nil {
		log = slog.Default()
	}
	sup := in.Supply
	slew := float64(sup.Limits().MaxSlew)
	if f := fx.Limits.MaxSlewAPerS; f > 0 && (slew <= 0 || f < slew) {
		slew = f
	}
	d := HaltMargin
	if i := math.Abs(lastI); slew > 0 && !math.IsNaN(i) {
		d += time.Duration(i / slew * 2 * float64(time.Second))
	} else if m := fx.Limits.MaxCurrentA; slew > 0 && m > 0 {
		d += time.Duration(m / slew * 2 * float64(time.Second))
	}
	hctx, cancel := bg(ctx, d)
	defer cancel()
	// A programmed ramp (sweep_mode: ramp) goes on towards its target
	// until told otherwise, also after a crash of the run that set it: end
	// it first, so that the halt's own steps apply.
	if r, ok := sup.(instr.Ramper); ok && r.CanRamp() {
		if rerr := r.RampOff(hctx); rerr != nil {
			log.Error("ending the programmed ramp failed; halting all the same", "err", rerr)
			note(fmt.Sprintf("ending the programmed ramp failed: %v", rerr))
		}
	}
	err := sup.Halt(hctx)
	if err != nil {
		log.Error("supply halt failed; trying again", "err", err)
		note(fmt.Sprintf("supply halt failed, tried again: %v", err))
		err = sup.Halt(hctx)
	}
	for _, r := range []interface {
		Halt(context.Context) error
	}{in.Integrator, in.FieldMeter, in.Thermometer} {
		if r == nil {
			continue
		}
		if herr := r.Halt(hctx); herr != nil {
			log.Warn("instrument halt failed", "err", herr)
			note(fmt.Sprintf("instrument halt failed: %v", herr))
		}
	}
	if err != nil {
		return lastI, err
	}
	i, ierr := sup.ReadCurrent(hctx)
	st, serr := sup.Status(hctx)
	if e := errors.Join(ierr, serr); e != nil {
		return lastI, fmt.Errorf("halted, but the read-back failed: %w", e)
	}
	if tol := 2 * zeroTol(fx); math.Abs(i.Value) > tol || st.OutputOn {
		return i.Value, fmt.Errorf("after the halt the supply reads %.4g A with output on = %v", i.Value, st.OutputOn)
	}
	log.Info("supply at zero, output off", "current_a", i.Value)
	return i.Value, nil
}

// halt ramps the supply to zero at its slew limit and turns it off (SafeHalt).
func (x *exec) halt(ctx context.Context) error {
	i, err := safeHalt(ctx, x.s.Instruments, x.s.Fixture, x.lastI, x.log, func(text string) { x.event(ctx, "warn", "%s", text) })
	if !math.IsNaN(i) {
		x.lastI = i
	}
	if err == nil {
		x.energd = false
	}
	return err
}

// lineCount is what an instrument's driver counts of its line's troubles.
type lineCount struct{ reconnects, breaks int64 }

// lineCounts returns, by role, how many times each instrument that can
// tell has lost and reconnected its port, and broken off an exchange.
func (x *exec) lineCounts() map[string]lineCount {
	type reconnector interface{ Reconnects() int64 }
	type breaker interface{ LineBreaks() int64 }
	out := map[string]lineCount{}
	for _, r := range x.s.Instruments.Members() {
		var c lineCount
		if d, ok := r.Dev.(reconnector); ok && d != nil {
			c.reconnects = d.Reconnects()
		}
		if d, ok := r.Dev.(breaker); ok && d != nil {
			c.breaks = d.LineBreaks()
		}
		out[instr.RoleLabel(r.Role)] = c
	}
	return out
}

// IdentityPrefix starts the event that records an instrument's identity
// as read when it was opened: "instrument ROLE: REPLY".
const IdentityPrefix = "instrument "

// identities records each instrument's *IDN? reply, as read when it was
// identified, for the run's provenance (instruments that can tell it).
func (x *exec) identities(ctx context.Context) {
	ids := Identities(x.s.Instruments)
	for _, m := range x.s.Instruments.Members() {
		if id := ids[m.Role]; id != "" {
			x.event(ctx, "info", "%s%s: %s", IdentityPrefix, m.Role, id)
		}
	}
}

// Identities returns each instrument's *IDN? reply as read when it was
// identified, by role (supply, integrator, field_meter, thermometer);
// instruments whose driver cannot tell are missing.
func Identities(in Instruments) map[string]string {
	type idn interface{ IdentityRead() string }
	out := map[string]string{}
	for _, r := range in.Members() {
		if d, ok := r.Dev.(idn); ok && d != nil {
			if id := d.IdentityRead(); id != "" {
				out[r.Role] = id
			}
		}
	}
	return out
}

// pollErrors reads, every instrument's error_poll period, the error queue
// of each instrument that has one: errors an instrument raises by itself
// (between settings) become events, and one its profile rates "fail" ends
// the run (the caller's ending ramps the supply down). Called between
// sample rounds, when no read is pending.
func (x *exec) pollErrors(ctx context.Context, now time.Time, final bool) error {
	if x.polled == nil {
		x.polled = map[string]time.Time{}
	}
	var ferr, ffail error // the final poll's: first failure, first fatal entry
	for _, m := range x.s.Instruments.Members() {
		p, ok := m.Dev.(instr.ErrorPoller)
		if !ok || m.Dev == nil {
			continue
		}
		name := instr.RoleLabel(m.Role)
		period := p.ErrorPollPeriod()
		if period <= 0 {
			continue
		}
		// The first poll comes with the first sample: it returns what the
		// open found in the queue (raised while nobody listened).
		last, seen := x.polled[name]
		if !final && seen && now.Sub(last) < period {
			continue
		}
		x.polled[name] = now
		// A lost or spoiled reply of the error query is asked again (the
		// driver resynchronises first), like a reading.
		cctx, cancel := context.WithTimeout(sampler.WithRetryCounter(ctx, &x.retries), x.comm)
		errs, err := sampler.Retry(cctx, p.PollErrors)
		cancel()
		if err != nil && !final {
			// What the failed poll read stays with the driver for the
			// ending's last poll.
			return x.stopErr(ctx, safety.Comm(name, fmt.Errorf("error queue poll: %w", err)))
		}
		if err != nil {
			// The ending's last poll: the entries read before the line
			// failed are named, and the other instruments still polled.
			ferr = cmp.Or(ferr, error(safety.Comm(name, fmt.Errorf("error queue poll: %w", err))))
		}
		var fail *safety.Violation
		for _, e := range errs {
			sev := "warn"
			if e.Fail {
				sev = "fail"
			}
			text := fmt.Sprintf("the %s raised error %d %q by itself (severity %s in its profile)", name, e.Code, e.Msg, sev)
			level := "warn"
			if e.Fail {
				level = "error"
				if fail == nil {
					fail = &safety.Violation{Limit: "instrument." + m.Role, Value: float64(e.Code), Text: text}
				}
			}
			x.event(ctx, level, "%s", text)
		}
		if fail != nil && !final {
			return fail
		}
		if fail != nil && ffail == nil {
			ffail = fail
		}
		if !final {
			// One instrument per sample round: the poll's round trip
			// delays the next setpoint, which a closed field loop feels.
			return nil
		}
	}
	return cmp.Or(ffail, ferr)
}
