package process

import (
	"fmt"
	"math"
	"time"

	"hystd/acq/record"
	"hystd/calib/uncert"
)

// Timing on a continuous ramp (Setup.Ramped).
//
// On a ramped sweep H changes between any two instants, so an error δ in
// the time at which a flux reading is placed against the current readings
// reads H(t + δ) for H(t): H + δ·dH/dt. Each sample's TUnc bounds its
// time error (the trigger's stamp, the clock rate's error over the elapsed
// time, the current readings' half round trips; acq/engine); taken as the
// half-width of a rectangular distribution, u_t = TUnc/√3 (GUM 4.3.7), and
// as common to the whole sweep (one trigger, one rate), the standard
// uncertainty is the root mean square of the samples' u_t. Its effect on
// each figure is evaluated as for the other sources: the figures again with
// every H moved by u_t·dH/dt (dH/dt by central differences in time), the
// change being the component "timing" (a lag widens the loop on both
// branches, which no uniform shift or scale of H would show). A stepped
// sweep reads H settled within each step and has no such term.

// timingU is the standard time uncertainty of a sweep's samples, s.
func timingU(tu []time.Duration) float64 {
	if len(tu) == 0 {
		return 0
	}
	ss := 0.0
	for _, u := range tu {
		x := u.Seconds() / math.Sqrt(3)
		ss += x * x
	}
	return math.Sqrt(ss / float64(len(tu)))
}

// rateOf is dH/dt at every sample by central differences (one-sided at
// the ends), A/m/s; 0 where the times do not increase.
func rateOf(t, h []float64) []float64 {
	out := make([]float64, len(h))
	for i := range h {
		a, b := max(i-1, 0), min(i+1, len(h)-1)
		if dt := t[b] - t[a]; dt > 0 {
			out[i] = (h[b] - h[a]) / dt
		}
	}
	return out
}

// addTiming adds the component "timing" to every figure's U (see above).
func (c curve) addTiming(s Setup, figs []record.Figure, tu []time.Duration) ([]record.Figure, error) {
	ut := timingU(tu)
	if ut == 0 || len(c.h) < 3 {
		return figs, nil
	}
	rate := rateOf(c.t, c.h)
	moved := c
	moved.h = make([]float64, len(c.h))
	for i := range c.h {
		moved.h[i] = c.h[i] + ut*rate[i]
	}
	shifted, err := moved.figures(s, nil)
	if err != nil {
		return nil, fmt.Errorf("timing uncertainty: %w", err)
	}
	by := map[string]float64{}
	for _, f := range shifted {
		by[f.Name] = f.Value
	}
	for i, f := range figs {
		v, ok := by[f.Name]
		if !ok {
			continue
		}
		d := math.Abs(v - f.Value)
		uc := f.U / uncert.K
		figs[i].U = uncert.K * math.Hypot(uc, d)
		figs[i].Note += fmt.Sprintf("; timing %.2g (samples' times ±%.3g ms (k=1) on the ramp, × dH/dt)", d, ut*1e3)
	}
	return figs, nil
}
