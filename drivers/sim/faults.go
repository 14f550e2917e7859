package sim

import (
	"math/rand/v2"
)

// faultState is a configured fault and how often it has fired.
type faultState struct {
	Fault
	fired int
	rng   *rand.Rand
}

func (f *faultState) exhausted() bool {
	limit := f.Times
	if limit == 0 {
		if f.Probability > 0 {
			return false
		}
		limit = 1
	}
	return f.fired >= limit
}

// timedFaults fires the faults whose time has come; b.mu is held.
func (b *Bench) timedFaults() {
	for _, f := range b.faults {
		if f.At != nil && f.fired == 0 && b.simT >= f.At.D() {
			b.fire(f)
		}
	}
}

// commandFaults fires the count and random faults of the role on its
// latest command line; b.mu is held.
func (b *Bench) commandFaults(in *instrument) {
	for _, f := range b.faults {
		if f.Role != in.role || f.exhausted() {
			continue
		}
		switch {
		case f.AfterCommands > 0 && in.cmds%f.AfterCommands == 0:
			b.fire(f)
		case f.Probability > 0 && f.rng.Float64() < f.Probability:
			b.fire(f)
		}
	}
}

// fire applies a fault now: reply faults are armed on their instrument.
func (b *Bench) fire(f *faultState) {
	in := b.insts[f.Role]
	if in == nil {
		return
	}
	f.fired++
	switch f.Kind {
	case FaultDrop, FaultDelay, FaultGarble:
		in.armed = append(in.armed, f)
	case FaultHangup:
		in.hangupDue = true
	case FaultError:
		code, msg := f.Code, f.Message
		if code == 0 {
			code = -300
		}
		if msg == "" {
			msg = "Device-specific error"
		}
		in.st.push(scpiError{code, msg})
	case FaultTrip:
		b.rig.Supply.Trip()
	}
}

// spoil applies the oldest armed reply fault to a reply about to be sent.
func (b *Bench) spoil(in *instrument, a *action) {
	if len(in.armed) == 0 {
		return
	}
	f := in.armed[0]
	in.armed = in.armed[1:]
	switch f.Kind {
	case FaultDrop:
		a.reply = nil
	case FaultDelay:
		a.delay = f.Delay.D()
	case FaultGarble:
		body := len(a.reply) - len(in.outTerm)
		if body > 0 {
			i := f.rng.IntN(body)
			// Flipping bit 6 turns every digit, sign, point and exponent
			// letter into a character no number parser accepts.
			a.reply[i] ^= 0x40
		}
	}
}
