package profile

import (
	"context"
	"fmt"

	"hystd/calib/units"
	"hystd/drivers/instr"
)

// Ramp is the optional `ramp:` section of a supply's profile: the supply
// can move its output current to a new setpoint at a programmed rate on its
// own (a continuous ramp), instead of jumping to it at its slew limit.
//
//	ramp:
//	  rate: {set: "SOUR:CURR:RAMP:RATE {}", format: "%.6E", unit: A/s, range: [1.0e-3, 20]}
//	  off:  {set: "SOUR:CURR:RAMP OFF"}   # back to plain setpoints
//
// With a rate set, set_current gives the target the output ramps to. The
// engine uses it for the sweep of a buffered capture with sweep_mode: ramp
// (acq/engine); the engine's safe halt (engine.SafeHalt, which every run's
// ending and the daemon's start-up halt use) sends off before the supply's
// Halt, so that a ramp in progress stops and the halt's own steps apply.
type Ramp struct {
	Rate Operation `yaml:"rate"`
	Off  Operation `yaml:"off"`
}

// validateRamp checks the ramp section (called from validate).
func validateRamp(p Profile, add adder) {
	r := p.Ramp
	if r == nil {
		return
	}
	if p.Role != instr.RoleSupply {
		add("ramp", "only for a supply, not %s", article(p.Role))
		return
	}
	validateSectionSetting(add, "ramp.rate", r.Rate, true, true, "A/s")
	validateSectionSetting(add, "ramp.off", r.Off, true, false, "")
	if rg := r.Rate.Range; len(rg) == 2 && !(rg[0] > 0) {
		add("ramp.rate.range", "the slowest rate must be positive, got %g A/s", rg[0])
	}
}

// CanRamp reports whether the supply's profile has a ramp section.
func (s *Supply) CanRamp() bool { return s.p.Ramp != nil }

// SetRampRate programs the rate at which the output moves to the setpoints
// that follow.
func (s *Supply) SetRampRate(ctx context.Context, rate units.AmperePerSecond) error {
	if s.p.Ramp == nil {
		return &OpError{Profile: s.p.Name, Op: "ramp_rate", Err: fmt.Errorf("%w: the profile has no ramp section", ErrUnsupported)}
	}
	if err := s.ready(ctx); err != nil {
		return err
	}
	return s.setWith(ctx, "ramp_rate", s.p.Ramp.Rate, float64(rate))
}

// RampOff ends the programmed ramp: setpoints apply at once again.
func (s *Supply) RampOff(ctx context.Context) error {
	if s.p.Ramp == nil {
		return nil
	}
	if err := s.ready(ctx); err != nil {
		return err
	}
	return s.setWith(ctx, "ramp_off", s.p.Ramp.Off, nil)
}
