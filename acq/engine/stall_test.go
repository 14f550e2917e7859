package engine

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"

	"hystd/acq/recipe"
	"hystd/acq/record"
)

// A fast loop: 8 A tips at 20 A/s, so one recipe step is 0.2 A at the
// 10 ms period the 160 points give, and an 800 ms stall spans 16 A of
// sweep — far beyond limits.max_slew_a_per_s × period = 0.5 A.
const fastLoop = `kind: recipe
name: fast-loop
steps:
  - record_loop: {amplitude: 8 A, rate: 20 A/s, points: 160, hold: 100ms, cycles: 1}
`

// TestStallResumesWithoutJump: a reply stalled for 800 ms in the middle of
// a sweep (the clock jumps while the supply's current is read) must not
// move the setpoint by more than one recipe step: the schedule waits and
// resumes. The bounds are the recipe's own staircase (its largest change
// between two consecutive periods, computed from recipe.Step.At) and the
// fixture's slew limit times the period.
func TestStallResumesWithoutJump(t *testing.T) {
	for _, stall := range []time.Duration{800 * time.Millisecond, 50 * time.Millisecond, 3 * time.Second} {
		t.Run(stall.String(), func(t *testing.T) {
			r := newRig(t)
			s := r.setup(t, fastLoop)
			var stalled bool
			r.sup.OnRead = func(n int) {
				// Mid-sweep of the loop (the loop's reads start after the
				// approach step): a delayed reply.
				if n == 120 {
					r.clk.Advance(stall)
					stalled = true
				}
			}
			p, err := Prepare(context.Background(), s)
			if err != nil {
				t.Fatal(err)
			}
			run, err := p.Execute(context.Background())
			if err != nil {
				t.Fatalf("run %s: %v", run.State, err)
			}
			r.assertSafe(t)
			if !stalled {
				t.Fatal("the stall was never injected")
			}
			// Each step's bound: the largest change of its own staircase
			// between consecutive periods, and the fixture's slew limit
			// times its period. Every setpoint sent must keep the larger
			// of the steps' bounds; the loop's samples (one step) its own.
			bound := func(st recipe.Step) float64 {
				var m float64
				for k := time.Duration(0); k*st.Period < st.Duration(); k++ {
					a, _, _ := st.At(k * st.Period)
					b, _, _ := st.At((k + 1) * st.Period)
					m = math.Max(m, math.Abs(b-a))
				}
				return math.Min(m, r.fx.Limits.MaxSlewAPerS*st.Period.Seconds())*(1+1e-9) + 1e-12
			}
			var all float64
			for _, st := range p.Steps {
				all = math.Max(all, bound(st))
			}
			sets := r.sup.SetsBefore
			if len(sets) < 100 {
				t.Fatalf("only %d setpoints", len(sets))
			}
			for k := 1; k < len(sets); k++ {
				if d := math.Abs(sets[k] - sets[k-1]); d > all {
					t.Errorf("setpoint %d moved %.4g A → %.4g A (%.4g A) at once; no step allows more than %.4g A",
						k, sets[k-1], sets[k], d, all)
				}
			}
			if len(r.w.Loops) != 1 {
				t.Fatalf("%d loops stored", len(r.w.Loops))
			}
			raw := r.w.Loops[0].Raw
			loopBound := bound(p.Steps[0])
			for k := 1; k < len(raw); k++ {
				if d := math.Abs(raw[k].Setpoint - raw[k-1].Setpoint); d > loopBound {
					t.Errorf("loop sample %d: setpoint moved %.4g A → %.4g A at once; one step of the loop is at most %.4g A",
						k, raw[k-1].Setpoint, raw[k].Setpoint, loopBound)
				}
			}
			maxStep := loopBound
			// The loop is whole: both tips reached.
			lo, hi := 0.0, 0.0
			for _, sm := range r.w.Loops[0].Raw {
				if sm.Phase == record.Sweep {
					lo, hi = math.Min(lo, sm.Setpoint), math.Max(hi, sm.Setpoint)
				}
			}
			if lo > -8+maxStep || hi < 8-maxStep {
				t.Errorf("sweep setpoints span %g..%g A, want ±8 A", lo, hi)
			}
			var said bool
			for _, e := range r.w.Events {
				said = said || strings.Contains(e.Text, "stalled")
			}
			if stall >= 50*time.Millisecond && !said {
				t.Error("no event tells of the stall")
			}
		})
	}
}
