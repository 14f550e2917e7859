package engine

import (
	"context"
	"errors"
	"fmt"
	"math"

	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/acq/safety"
	"hystd/calib/loop"
	"hystd/calib/units"
)

// aimConditioning is the number of cycles at the amplitude found before the
// loop is recorded: the tries ran at other amplitudes.
const aimConditioning = 2

// aimed runs a Record step aimed at a peak B or J: loops are tried (each
// after one cycle at its amplitude) at
// amplitudes chosen by secant steps on the measured tip against the
// amplitude (the first from the recipe, the second in proportion), never
// above the fixture's max current and at most Aim.Tries; once a tip is
// within the tolerance the specimen is conditioned at that amplitude and
// the loop recorded; the level then returns to where the plan continues. A
// target out of reach ends the run with the reason (the ending ramps the
// supply down).
func (x *exec) aimed(ctx context.Context, st recipe.Step) error {
	k := st.Aim
	if x.s.Process == nil {
		return fmt.Errorf("step %d (%s): aiming at a peak %s needs the loop processing, and none is configured", st.N, st.Source, k.Of)
	}
	x.event(ctx, "info", "step %d (%s): aiming at a peak %s of %.4g T ± %.2g T, at most %d tries", st.N, st.Source, k.Of, k.Target, k.Tolerance, k.Tries)
	a, from := k.First, st.From
	var pa, pb float64
	have, found := false, false
	var b float64
	for try := 1; try <= k.Tries; try++ {
		// One cycle at the try's amplitude first: the tip of a loop right
		// after one at another amplitude still remembers that one.
		if err := x.step(ctx, st.ConditionAt(a, from, 1)); err != nil {
			return err
		}
		var err error
		b, err = x.tryAt(ctx, st.AtAmplitude(a, a))
		if err != nil {
			return err
		}
		from = a
		x.event(ctx, "info", "step %d: try %d at %.6g %s: peak %s %.5g T", st.N, try, a, st.Unit, k.Of, b)
		if math.Abs(b-k.Target) <= k.Tolerance {
			found = true
			break
		}
		atMax := !math.IsNaN(k.Max) && a >= k.Max
		if atMax && b < k.Target {
			return &safety.Violation{Limit: "limits.max_current_a", Value: a, Max: k.Max, Unit: st.Unit,
				Text: fmt.Sprintf("step %d (%s): the peak %s of %.4g T is not reachable on this fixture: %.4g T at the largest amplitude it allows (%.6g %s, limits.max_current_a = %g A)",
					st.N, st.Source, k.Of, k.Target, b, a, st.Unit, x.s.Fixture.Limits.MaxCurrentA)}
		}
		next := nextAmplitude(a, b, pa, pb, have, k.Target)
		if !math.IsNaN(k.Max) {
			next = math.Min(next, k.Max)
		}
		pa, pb, have = a, b, true
		a = next
	}
	if !found {
		return &safety.Violation{Limit: "peak", Value: b, Unit: "T",
			Text: fmt.Sprintf("step %d (%s): the peak %s of %.4g T was not reached within %.2g T in %d tries (last: %.6g %s gave %.5g T)",
				st.N, st.Source, k.Of, k.Target, k.Tolerance, k.Tries, pa, st.Unit, b)}
	}
	x.event(ctx, "info", "step %d: amplitude %.6g %s found for the peak %s of %.4g T; conditioning, then recording", st.N, a, st.Unit, k.Of, k.Target)
	if err := x.step(ctx, st.ConditionAt(a, from, aimConditioning)); err != nil {
		return err
	}
	if err := x.step(ctx, st.AtAmplitude(a, a)); err != nil {
		return err
	}
	if end := st.End(); end != a {
		return x.step(ctx, st.ConditionAt(end, a, 0))
	}
	return nil
}

// nextAmplitude is the secant step from (pa, pb) and (a, b) to the target,
// or, with no usable previous try, the step in proportion (B ∝ amplitude);
// kept within a quarter and four times a, so that one odd reading cannot
// send the search far.
func nextAmplitude(a, b, pa, pb float64, have bool, target float64) float64 {
	next := math.NaN()
	if have && b != pb && a != pa {
		next = a + (target-b)*(a-pa)/(b-pb)
	}
	if !(next > 0) || math.IsInf(next, 0) {
		if b > 0 {
			next = a * target / b
		} else {
			next = 2 * a
		}
	}
	return math.Max(a/4, math.Min(4*a, next))
}

// tryAt runs one try of a search (a loop recorded and processed but not
// stored) and returns its peak B or J.
func (x *exec) tryAt(ctx context.Context, st recipe.Step) (float64, error) {
	var raw []record.Sample
	x.tryRaw = &raw
	err := x.step(ctx, st)
	x.tryRaw = nil
	if err != nil {
		return 0, err
	}
	pr, err := x.s.Process(raw, *st.Loop)
	if err != nil {
		return 0, fmt.Errorf("step %d (%s): a try at %.6g %s could not be processed: %w", st.N, st.Source, st.End(), st.Unit, err)
	}
	var bmax, hmax float64 = math.NaN(), math.NaN()
	for _, f := range pr.Figures {
		switch f.Name {
		case loop.FigBmax:
			bmax = f.Value
		case loop.FigHmax:
			hmax = f.Value
		}
	}
	if st.Aim.Of == "J" {
		bmax -= units.Mu0 * hmax // J = B − μ0·H at the tip
	}
	if math.IsNaN(bmax) {
		return 0, errors.New("a try gave no peak induction")
	}
	return bmax, nil
}

// aimFigures are the figures an aimed loop adds (calib/loop.Defs, FromAim):
// the amplitude used, in the step's unit, and the target.
func aimFigures(st recipe.Step) []record.Figure {
	k := st.Aim
	return []record.Figure{
		{Name: loop.FigDriveAmplitude, Value: st.End(), Unit: st.Unit, Note: fmt.Sprintf("amplitude found for the peak %s", k.Of)},
		{Name: loop.FigPeakTarget, Value: k.Target, Unit: loop.Units[loop.FigPeakTarget], Note: fmt.Sprintf("peak %s aimed at, within ±%g T", k.Of, k.Tolerance)},
	}
}
