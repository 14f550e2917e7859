package sim

import (
	"fmt"
	"math/rand/v2"
	"strings"

	"hystd/drivers/scpi"
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
	if b.injected == nil {
		b.injected = map[string]int{}
	}
	b.injected[f.Kind]++
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
	case FaultNoTrigger, FaultShortBuffer, FaultLateTrigger:
		fireBuffered(in, f.Kind, f.Delay.D().Seconds())
	}
}

// spoil applies the oldest armed reply fault to a reply about to be sent.
func (b *Bench) spoil(in *instrument, a *action) {
	if len(in.armed) == 0 {
		return
	}
	f := in.armed[0]
	in.armed = in.armed[1:]
	entry, isEntry := queueEntry(a.reply, in.outTerm)
	switch f.Kind {
	case FaultDrop:
		a.reply = nil
		if isEntry {
			b.destroyed = append(b.destroyed, entry.Msg)
		}
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
		// A flip in the code or the quotes leaves no entry to read; one
		// inside the message leaves it readable, one letter changed.
		if e, ok := queueEntry(a.reply, in.outTerm); isEntry && (!ok || e.Code != entry.Code) {
			b.destroyed = append(b.destroyed, entry.Msg)
		}
	}
}

// queueEntry parses a reply as an error-queue entry with a non-zero code
// (`code,"message"`).
func queueEntry(reply []byte, term string) (scpi.QueueEntry, bool) {
	line := strings.TrimSuffix(string(reply), term)
	if !strings.Contains(line, `,"`) {
		return scpi.QueueEntry{}, false
	}
	e, err := scpi.ParseQueueEntry(line)
	return e, err == nil && e.Code != 0
}

// DestroyedErrors returns the messages of the error-queue entries whose
// reply a drop or a garble spoiled beyond reading: the instrument removed
// them from its queue and no client can read them any more (the lost or
// spoiled reply is what a run can name). In fault order.
func (b *Bench) DestroyedErrors() []string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return append([]string(nil), b.destroyed...)
}

// Injected returns how many faults have fired so far, by kind (drop,
// delay, garble, hangup, error, trip).
func (b *Bench) Injected() map[string]int {
	b.mu.Lock()
	defer b.mu.Unlock()
	out := make(map[string]int, len(b.injected))
	for k, v := range b.injected {
		out[k] = v
	}
	return out
}

// Inject adds a fault while the bench runs, checked as a bench file's
// faults are. Without a trigger it acts now: a reply fault (drop, delay,
// garble) spoils the role's next reply, the others happen at once. At
// counts from the bench's start.
func (b *Bench) Inject(f Fault) error {
	roles := map[string]InstrumentConfig{}
	for r := range b.insts {
		roles[r] = InstrumentConfig{}
	}
	now := f.At == nil && f.AfterCommands == 0 && f.Probability == 0
	if now {
		f.AfterCommands = 1
	}
	if err := f.check(roles); err != nil {
		return fmt.Errorf("sim: fault %s on %s: %w", f.Kind, f.Role, err)
	}
	b.mu.Lock()
	defer b.mu.Unlock()
	fs := &faultState{Fault: f, rng: rand.New(rand.NewPCG(b.cfg.Seed, uint64(len(b.faults))+1))}
	b.faults = append(b.faults, fs)
	if now && f.Kind != FaultDrop && f.Kind != FaultDelay && f.Kind != FaultGarble {
		b.fire(fs)
	}
	return nil
}
