// Package safety holds the checks the engine runs on every sample against a
// fixture's hard limits: current, compliance voltage, dI/dt, winding
// temperature and resistance rise, field-meter reading, integrator overload,
// supply status, instrument errors and lost communication.
//
// The checks are pure: a Checker keeps only the short history it needs
// (dI/dt, sustained resistance rise) and does no I/O. A Checker is not safe
// for concurrent use; the engine owns one per run.
package safety

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"hystd/acq/config"
	"hystd/drivers/instr"
)

// Tolerances of the read-back checks: the limits are hard, but read-back
// values carry the meter's error, so a reading must exceed the limit by
// more than these before it counts as crossed.
const (
	// CurrentTolerance is the relative margin on max_current_a (2 %) plus
	// CurrentToleranceA.
	CurrentTolerance  = 0.02
	CurrentToleranceA = 0.005
	// SlewMargin is the factor on max_slew_a_per_s a measured dI/dt may reach
	// (the supply's own slew ripple), plus the read-back noise SlewNoiseA
	// over the window.
	SlewMargin = 1.25
	SlewNoiseA = 0.01
	// SlewWindow is the span over which dI/dt is measured; ShortWindow the
	// shortest span looked at, so that one late reading is not a slew.
	SlewWindow  = 100 * time.Millisecond
	ShortWindow = 20 * time.Millisecond
	// ResistanceSamples is how many consecutive samples the resistance must
	// stay above its limit; one noisy sample does not end a run.
	ResistanceSamples = 5
)

// Limits are the hard limits one run is checked against; a zero limit is not checked.
type Limits struct {
	MaxCurrent        float64 // A
	MaxVoltage        float64 // V
	MaxSlew           float64 // A/s
	MaxTempC          float64 // °C
	MaxResistanceRise float64 // fraction of R0
	MaxField          float64 // T, field-meter reading
	R0                float64 // Ω, winding resistance at 20 °C
	L                 float64 // H, winding inductance
}

// LimitsOf returns the limits of a fixture.
func LimitsOf(fx config.Fixture) Limits {
	return Limits{
		MaxCurrent:        fx.Limits.MaxCurrentA,
		MaxVoltage:        fx.Limits.MaxVoltageV,
		MaxSlew:           fx.Limits.MaxSlewAPerS,
		MaxTempC:          fx.Limits.MaxWindingTempC,
		MaxResistanceRise: fx.Limits.MaxResistanceRise,
		MaxField:          fx.Limits.MaxFieldT,
		R0:                fx.Winding.ResistanceOhm,
		L:                 fx.Winding.InductanceH,
	}
}

// Observation is what one sample tells about the fixture. Absent channels are NaN.
type Observation struct {
	T      time.Duration // since the run started
	TUnc   time.Duration // uncertainty of T
	I      float64       // A
	V      float64       // V
	BProbe float64       // T
	TempC  float64       // °C
	// Status is the supply's status; HaveStatus false when it was not read.
	Status     instr.SupplyStatus
	HaveStatus bool
	// Energised is true when the engine has turned the output on and expects it on.
	Energised bool
	Overload  bool // integrator overload
}

// Violation is a crossed limit. Limit is the config key of the limit, or a
// short name of the condition ("supply.status", "integrator.overload").
type Violation struct {
	Limit string
	Value float64 // NaN when the condition has no value
	Max   float64
	Unit  string
	Text  string // a sentence for the run's reason
}

func (v *Violation) Error() string { return v.Text }

// Checker checks observations against Limits.
type Checker struct {
	lim   Limits
	hist  []obsIV // recent (T, I) within SlewWindow
	rHigh int     // consecutive samples with R above its limit
}

type obsIV struct {
	t time.Duration
	i float64
	u time.Duration // time-stamp uncertainty
}

// NewChecker returns a Checker for one run.
func NewChecker(l Limits) *Checker { return &Checker{lim: l} }

// Check returns the first limit o crosses, or nil.
func (c *Checker) Check(o Observation) *Violation {
	if v := statusViolation(o, c.lim); v != nil {
		return v
	}
	if v := levelViolation(o, c.lim); v != nil {
		return v
	}
	didt, ok := c.slew(o)
	if v := c.slewViolation(o, ok); v != nil {
		return v
	}
	return c.resistance(o, didt, ok)
}

// statusViolation is what the supply's status and the integrator's
// overload flag say, or nil.
func statusViolation(o Observation, l Limits) *Violation {
	if o.HaveStatus {
		switch {
		case o.Status.Tripped:
			return Tripped(o.Status)
		case o.Status.OverTemp:
			return &Violation{Limit: "supply.status", Value: math.NaN(), Text: "supply reports over-temperature"}
		case o.Status.Compliance:
			return &Violation{Limit: "limits.max_voltage_v", Value: o.V, Max: l.MaxVoltage, Unit: "V",
				Text: fmt.Sprintf("supply in voltage compliance at %.4g V: the current no longer follows the setpoint", o.V)}
		case o.Energised && !o.Status.OutputOn:
			return &Violation{Limit: "supply.status", Value: math.NaN(), Text: "supply output went off while the run had it on"}
		}
	}
	if o.Overload {
		return &Violation{Limit: "integrator.overload", Value: math.NaN(), Text: "integrator overload: the flux left the selected range"}
	}
	return nil
}

// levelViolation is the first reading beyond its fixture limit (current,
// voltage, field-meter reading, winding temperature), or nil.
func levelViolation(o Observation, l Limits) *Violation {
	if l.MaxCurrent > 0 && !math.IsNaN(o.I) && math.Abs(o.I) > l.MaxCurrent*(1+CurrentTolerance)+CurrentToleranceA {
		return &Violation{Limit: "limits.max_current_a", Value: o.I, Max: l.MaxCurrent, Unit: "A",
			Text: fmt.Sprintf("current %.4g A crossed the fixture limit limits.max_current_a = %g A", o.I, l.MaxCurrent)}
	}
	if l.MaxVoltage > 0 && !math.IsNaN(o.V) && math.Abs(o.V) > l.MaxVoltage {
		return &Violation{Limit: "limits.max_voltage_v", Value: o.V, Max: l.MaxVoltage, Unit: "V",
			Text: fmt.Sprintf("voltage %.4g V crossed the fixture limit limits.max_voltage_v = %g V", o.V, l.MaxVoltage)}
	}
	if l.MaxField > 0 && !math.IsNaN(o.BProbe) && math.Abs(o.BProbe) > l.MaxField {
		return &Violation{Limit: "limits.max_field_t", Value: o.BProbe, Max: l.MaxField, Unit: "T",
			Text: fmt.Sprintf("field-meter reading %.4g T crossed the fixture limit limits.max_field_t = %g T", o.BProbe, l.MaxField)}
	}
	if l.MaxTempC > 0 && !math.IsNaN(o.TempC) && o.TempC > l.MaxTempC {
		return &Violation{Limit: "limits.max_winding_temp_c", Value: o.TempC, Max: l.MaxTempC, Unit: "°C",
			Text: fmt.Sprintf("winding temperature %.4g °C crossed the fixture limit limits.max_winding_temp_c = %g °C", o.TempC, l.MaxTempC)}
	}
	return nil
}

// slewViolation checks the current's rate of change over the window
// (a slow run-away, when ok says the window is covered) and over the
// short window (a collapse within a few samples), each allowing for the
// read-back noise and for the time-stamp uncertainty of both samples.
func (c *Checker) slewViolation(o Observation, ok bool) *Violation {
	if !(c.lim.MaxSlew > 0) || math.IsNaN(o.I) {
		return nil
	}
	if ok {
		if v := c.slewSince(o, c.hist[0]); v != nil {
			return v
		}
	}
	if a, found := c.before(o.T - ShortWindow); found {
		return c.slewSince(o, a)
	}
	return nil
}

// slewSince checks the rate of change from the earlier sample a to o.
func (c *Checker) slewSince(o Observation, a obsIV) *Violation {
	l := c.lim
	span := o.T - a.t
	sec := span.Seconds()
	if sec <= 0 {
		return nil
	}
	rate := (o.I - a.i) / sec
	unc := (o.TUnc + a.u).Seconds()
	if math.Abs(rate) > l.MaxSlew*SlewMargin*(1+unc/sec)+2*SlewNoiseA/sec {
		return &Violation{Limit: "limits.max_slew_a_per_s", Value: rate, Max: l.MaxSlew, Unit: "A/s",
			Text: fmt.Sprintf("current changed at %.4g A/s, beyond the fixture limit limits.max_slew_a_per_s = %g A/s", rate, l.MaxSlew)}
	}
	return nil
}

// before returns the newest recorded sample taken at or before t.
func (c *Checker) before(t time.Duration) (obsIV, bool) {
	for k := len(c.hist) - 1; k >= 0; k-- {
		if c.hist[k].t <= t {
			return c.hist[k], true
		}
	}
	return obsIV{}, false
}

// slew records o and returns dI/dt over the last SlewWindow, when at least
// half a window is covered.
func (c *Checker) slew(o Observation) (float64, bool) {
	if math.IsNaN(o.I) {
		return 0, false
	}
	c.hist = append(c.hist, obsIV{o.T, o.I, o.TUnc})
	k := 0
	for k < len(c.hist)-1 && o.T-c.hist[k+1].t >= SlewWindow {
		k++
	}
	c.hist = c.hist[k:]
	first := c.hist[0]
	if o.T-first.t < SlewWindow/2 {
		return 0, false
	}
	return (o.I - first.i) / (float64(o.T-first.t) / float64(time.Second)), true
}

// PlateauTolerance is how far, relative to the current, the readings within
// SlewWindow may spread for the current to count as steady (dI/dt ≈ 0), on
// top of twice SlewNoiseA.
const PlateauTolerance = 0.005

// resistance estimates the winding's resistance R = V/I, only while the
// current has been steady over the whole slew window (a hold, a plateau of
// the staircase): there L·dI/dt vanishes whatever the inductance. On a ramp
// no estimate is made — the inductance of an iron-cored winding varies by
// orders of magnitude along a loop, so (V − L·dI/dt)/I with a constant L
// misfires (it tripped falsely with L ≥ 0.2 H). It reports a rise
// sustained over ResistanceSamples estimates while the current is large
// enough to give a meaningful value.
func (c *Checker) resistance(o Observation, _ float64, ok bool) *Violation {
	l := c.lim
	if l.MaxResistanceRise <= 0 || l.R0 <= 0 || !ok || math.IsNaN(o.V) {
		return nil
	}
	floor := math.Max(0.05, 0.1*l.MaxCurrent)
	if math.Abs(o.I) < floor {
		c.rHigh = 0
		return nil
	}
	tol := 2*SlewNoiseA + PlateauTolerance*math.Abs(o.I)
	for _, h := range c.hist {
		if math.Abs(h.i-o.I) > tol {
			return nil // ramping: no estimate, and a run of high ones is not broken either
		}
	}
	r := o.V / o.I
	rise := r/l.R0 - 1
	if rise <= l.MaxResistanceRise {
		c.rHigh = 0
		return nil
	}
	c.rHigh++
	if c.rHigh < ResistanceSamples {
		return nil
	}
	return &Violation{Limit: "limits.max_resistance_rise", Value: rise, Max: l.MaxResistanceRise, Unit: "",
		Text: fmt.Sprintf("winding resistance %.4g Ω (V/I with the current steady) is %.1f %% above %g Ω, beyond the fixture limit limits.max_resistance_rise = %g (the winding is heating)",
			r, 100*rise, l.R0, l.MaxResistanceRise)}
}

// Tripped is the Violation of a supply whose trip has latched: it shut its
// output down by itself and stays off until the trip is cleared; the text
// says what clears it (the profile's trip_clear).
func Tripped(st instr.SupplyStatus) *Violation {
	clear := st.TripClear
	if clear == "" {
		clear = "remove the cause, then clear the trip at the supply before the next run"
	}
	return &Violation{Limit: "supply.status", Value: math.NaN(),
		Text: fmt.Sprintf("supply tripped (latched): it shut its output down by itself and stays off until the trip is cleared — %s", clear)}
}

// Comm turns an instrument I/O error into the Violation a run ends with:
// no reply within the comm timeout, a lost port, or the instrument's own error.
func Comm(role string, err error) *Violation {
	var v *Violation
	if errors.As(err, &v) {
		return v
	}
	text := fmt.Sprintf("lost communication with the %s: %v", role, err)
	if errors.Is(err, context.DeadlineExceeded) {
		text = fmt.Sprintf("no reply from the %s within limits.comm_timeout: %v", role, err)
	}
	return &Violation{Limit: "comm." + role, Value: math.NaN(), Text: text}
}

// Instrument turns an error an instrument reported (its error queue, a
// refused setting, a reply that does not parse) into the Violation a run
// ends with.
func Instrument(role string, err error) *Violation {
	var v *Violation
	if errors.As(err, &v) {
		return v
	}
	return &Violation{Limit: "instrument." + role, Value: math.NaN(), Text: fmt.Sprintf("the %s reported an error: %v", role, err)}
}
