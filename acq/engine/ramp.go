package engine

import (
	"context"
	"fmt"
	"math"
	"sort"
	"time"

	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/acq/sampler"
	"hystd/calib/units"
	"hystd/drivers/instr"
)

// Continuous ramp (recipe sweep_mode: ramp, with capture: buffered).
//
// Instead of a staircase of setpoints, the supply is programmed to ramp
// from tip to tip on its own: at the round where a sweep leg starts, the
// engine reads the supply, sets the leg's rate (|ΔI|/duration, when it
// changed) and sends the leg's end as the setpoint (instr.Ramper). Every
// setpoint period it still reads the supply's current (and the
// thermometer), as in the stepped sweep, but changes nothing. At the first
// round after the sweep the programmed ramp is ended (setpoints apply at
// once again); every ending of a run ends it too, before the supply is
// ramped down (SafeHalt).
//
// H. A buffered reading at time t (placed on the engine's clock by the
// alignment model in buffered.go) takes the current interpolated linearly
// in time between the two current readings around t, each at its own
// instant (the midpoint of its exchange). Every buffered reading of the
// sweep is kept (there is no step to settle). Its time uncertainty is the
// larger of its own and the two readings'; a loop of a ramped sweep carries
// that uncertainty, times dH/dt, into every figure's budget as "timing"
// (acq/process, Setup.Ramped).
//
// The interpolation cuts the corner where the current turns (the tips,
// and the sweep's start when the ramp begins a little after the round
// that read the start level): there the current between two readings is
// not a straight line, an error of at most rate × the command's latency
// (a few ms) in the few readings next to a tip.

// rampState is the programmed ramp of one buffered step.
type rampState struct {
	st      recipe.Step
	ramper  instr.Ramper
	at      time.Duration // recipe time of the round being read
	leg     int           // index in st.Segments of the leg programmed; -1 none
	legTo   float64       // that leg's end, A
	rate    float64       // rate set, A/s; 0 none
	ramping bool          // a rate is programmed and not ended
	// reads are the current readings of the sweep, from the round that
	// started it to the first round after it.
	reads []iread
}

// iread is one current reading at its own instant.
type iread struct {
	t, u  time.Duration // from the run's start, and its uncertainty
	s     record.Sample
	level float64 // the recipe's level at that round
}

func newRampState(st recipe.Step, sup instr.Supply) *rampState {
	r, _ := sup.(instr.Ramper) // checked by checkRamp
	return &rampState{st: st, ramper: r, leg: -1}
}

// checkRamp refuses, before anything is energised, a ramped step on a
// supply whose profile cannot ramp.
func checkRamp(s Setup, st recipe.Step) error {
	if !st.Capture.Ramp {
		return nil
	}
	if r, ok := s.Instruments.Supply.(instr.Ramper); !ok || !r.CanRamp() {
		return &Refused{s.Recipe.Errorf(st.Source, "step %d (%s): sweep_mode: ramp, but the supply's instrument profile %q has no ramp section (a programmed ramp rate); use sweep_mode: steps or a profile with one", st.N, st.Source, profileName(s, "supply"))}
	}
	return nil
}

// legAt is the sweep leg the recipe time t falls in: its index, the level
// it starts from and its segment; ok is false outside the sweep.
func (r *rampState) legAt(t time.Duration) (int, float64, recipe.Segment, bool) {
	from := r.st.From
	var start time.Duration
	for i, g := range r.st.Segments {
		if t >= start && t < start+g.Dur {
			return i, from, g, g.Phase == record.Sweep
		}
		start += g.Dur
		from = g.To
	}
	return 0, 0, recipe.Segment{}, false
}

// beforeRound tells a ramped capture the recipe time t of the round about
// to be read. Ramping, the supply gets no setpoint (whose error-queue read
// would show what it raised) for a whole leg: its queue is made due every
// round instead (polled: the engine's last error poll of each role), as
// often as a stepped sweep reads it.
func (c *capture) beforeRound(t time.Duration, polled map[string]time.Time) {
	if c.ramp == nil {
		return
	}
	c.ramp.at = t
	if c.ramp.ramping {
		delete(polled, instr.RoleLabel(instr.RoleSupply))
	}
}

// sweepNext reports whether the round after the one being read (period
// later) is the sweep's first.
func (r *rampState) sweepNext(period time.Duration) bool {
	_, _, _, now := r.legAt(r.at)
	_, _, _, next := r.legAt(r.at + period)
	return !now && next
}

// program starts the ramp of the leg the round falls in when it is not
// the one programmed: the leg's rate, then its end as the setpoint.
func (r *rampState) program(ctx context.Context, sup instr.Supply) error {
	i, from, g, ok := r.legAt(r.at)
	if !ok || i == r.leg {
		return nil
	}
	rate := math.Abs(g.To-from) / g.Dur.Seconds()
	if rate != r.rate {
		if _, err := sampler.Retry(ctx, func(ctx context.Context) (struct{}, error) {
			return struct{}{}, r.ramper.SetRampRate(ctx, units.AmperePerSecond(rate))
		}); err != nil {
			return &sampler.RoleError{Role: "supply", Err: fmt.Errorf("set ramp rate %.6g A/s: %w", rate, err)}
		}
		r.rate, r.ramping = rate, true
	}
	r.leg, r.legTo = i, g.To
	return setCurrent(ctx, sup, g.To)
}

func setCurrent(ctx context.Context, sup instr.Supply, level float64) error {
	if _, err := sampler.Retry(ctx, func(ctx context.Context) (struct{}, error) {
		return struct{}{}, sup.SetCurrent(ctx, units.Ampere(level))
	}); err != nil {
		return &sampler.RoleError{Role: "supply", Err: fmt.Errorf("set current %.6g A: %w", level, err)}
	}
	return nil
}

// end ends the programmed ramp, if any.
func (r *rampState) end(ctx context.Context) error {
	if !r.ramping {
		return nil
	}
	r.ramping, r.rate = false, 0
	if err := r.ramper.RampOff(ctx); err != nil {
		return &sampler.RoleError{Role: "supply", Err: fmt.Errorf("end the programmed ramp: %w", err)}
	}
	return nil
}

// hold stops the ramp of the leg in progress a setpoint period's travel
// beyond the last current read (never beyond the leg's end, never back:
// the branch stays monotonic); resume sends the leg's end again.
func (r *rampState) hold(ctx context.Context, sup instr.Supply, lastI float64, period time.Duration) error {
	if r.leg < 0 || !r.ramping {
		return nil
	}
	step := r.rate * period.Seconds()
	to := math.Min(lastI+step, r.legTo)
	if r.legTo < lastI {
		to = math.Max(lastI-step, r.legTo)
	}
	return setCurrent(ctx, sup, to)
}

func (r *rampState) resume(ctx context.Context, sup instr.Supply) error {
	if r.leg < 0 || !r.ramping {
		return nil
	}
	return setCurrent(ctx, sup, r.legTo)
}

// sweepReads collects the current readings of the sweep from the step's
// rounds: from the first sweep round to the first round after the sweep.
func (c *capture) sweepReads() []iread {
	r := c.ramp
	if r.reads != nil {
		return r.reads
	}
	in := false
	for _, rd := range c.rounds {
		if rd.phase == record.Sweep {
			in = true
		} else if !in {
			continue
		}
		r.reads = append(r.reads, iread{t: rd.s.T + rd.s.DtI, u: rd.s.TUnc, s: rd.s, level: rd.level})
		if rd.phase != record.Sweep {
			break
		}
	}
	return r.reads
}

// rampAt is the supply's side of a buffered reading at t (time
// uncertainty u) on a ramped sweep: the current interpolated between the
// readings around t; ok is false outside the sweep's readings.
func (c *capture) rampAt(t, u time.Duration) (record.Sample, bool) {
	rs := c.sweepReads()
	j := sort.Search(len(rs), func(i int) bool { return rs[i].t >= t })
	if j == 0 || j == len(rs) {
		return record.Sample{}, false
	}
	a, b := rs[j-1], rs[j]
	f := float64(t-a.t) / float64(b.t-a.t)
	lerp := func(x, y float64) float64 { return x + f*(y-x) }
	return record.Sample{T: t, TUnc: max(u, a.u, b.u), Phase: record.Sweep, I: lerp(a.s.I, b.s.I), V: lerp(a.s.V, b.s.V),
		TempC: a.s.TempC, Setpoint: lerp(a.level, b.level)}, true
}
