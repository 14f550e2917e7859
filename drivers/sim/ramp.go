package sim

import (
	"strings"

	"hystd/drivers/instr"
	"hystd/drivers/profile"
)

// Programmed ramp of the simulated supply (a supply profile's ramp
// section). With a rate set, the output current moves towards each new
// setpoint at that rate on the supply's own clock, which runs supplyDrift
// fast against the bench: rate·(1 + supplyDrift) A per bench second (never
// beyond the slew limit). ramp.off, *RST and a trip end it.
const rampPrefix = "ramp."

// supplyDrift is the rate error of the simulated supply's clock.
const supplyDrift = 60e-6

// rampMatchers recognises the commands of a profile's ramp section.
func rampMatchers(p profile.Profile) []matcher {
	r := p.Ramp
	if r == nil || p.Role != instr.RoleSupply {
		return nil
	}
	var ms []matcher
	for name, op := range map[string]profile.Operation{"rate": r.Rate, "off": r.Off} {
		m := matcher{name: rampPrefix + name, op: op}
		m.match(op.Set)
		ms = append(ms, m)
	}
	return ms
}

// rampSet runs a setting of the ramp section; b.mu is held.
func (b *Bench) rampSet(name string, v value) *scpiError {
	s := b.rig.Supply
	switch strings.TrimPrefix(name, rampPrefix) {
	case "rate":
		if !(v.Num > 0) {
			return &errOutOfRange
		}
		s.Ramp = v.Num * (1 + supplyDrift)
	case "off":
		s.Ramp = 0
	default:
		return &errUndefHeader
	}
	return nil
}

// currentNow is the supply's current at the clock's present, which may lie
// up to one physics step beyond the last step computed: on a programmed
// ramp the current has moved on by the rate over that time (towards the
// setpoint, never past it); otherwise that of the last step. b.mu is held.
func (b *Bench) currentNow() float64 {
	s := b.rig.Supply
	if !(s.Ramp > 0) || !s.Output || s.Tripped {
		return s.I
	}
	ahead := (b.clock.Now().Sub(b.start) - b.simT).Seconds()
	step := s.Ramp * ahead
	return s.I + max(-step, min(step, s.Setpoint-s.I))
}
