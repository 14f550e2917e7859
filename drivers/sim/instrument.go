package sim

import (
	"bytes"
	"context"
	"errors"
	"os"
	"strconv"
	"strings"
	"syscall"
	"time"

	"math/rand/v2"

	"hystd/drivers/clock"
	"hystd/drivers/instr"
	"hystd/drivers/profile"
)

// instrument is one served role: its profile, its pseudo-terminal and its
// IEEE 488.2 state. Fields other than pty are guarded by Bench.mu.
type instrument struct {
	role      string
	prof      profile.Profile
	ms        []matcher
	pty       *pty
	serial    int
	inTerm    byte   // last byte of what clients write
	outTerm   string // what ends a reply
	st        scpiState
	cmds      int           // command lines received
	armed     []*faultState // reply faults waiting for the next reply
	hangupDue bool
	noise     *rand.Rand  // this role's reading noise, seeded from the bench's seed
	acq       acquisition // timed acquisition (buffered.go)
	// busy is set while a command line received is being executed and
	// answered, and while bytes of an unfinished line are held; holding
	// while a delayed reply waits for its time.
	busy, holding bool
}

func newInstrument(role string, p profile.Profile, pt *pty, serial int) *instrument {
	in := &instrument{role: role, prof: p, ms: newMatchers(p), pty: pt, serial: serial,
		inTerm: '\n', outTerm: p.Terminators.Read}
	if w := p.Terminators.Write; w != "" {
		in.inTerm = w[len(w)-1]
	}
	if in.outTerm == "" {
		in.outTerm = "\n"
	}
	in.st.esr = esrPON
	return in
}

// action is what the serving loop does with one command line's outcome.
type action struct {
	reply  []byte // nil: nothing to send
	delay  time.Duration
	hangup bool
}

// serve reads command lines from the master and answers them until ctx ends
// or the pty is closed. EIO (no client has the port open) is waited out.
func (b *Bench) serve(ctx context.Context, in *instrument) {
	buf := make([]byte, 4096)
	var line []byte
	for ctx.Err() == nil {
		b.mu.Lock()
		due := in.hangupDue
		in.hangupDue = false
		b.mu.Unlock()
		if due {
			in.pty.hangup()
			line = line[:0]
			b.setBusy(in, false)
		}
		in.pty.master.SetReadDeadline(time.Now().Add(50 * time.Millisecond))
		n, err := in.pty.master.Read(buf)
		if n > 0 {
			b.setBusy(in, true)
		}
		for _, c := range buf[:n] {
			if c != in.inTerm {
				if len(line) < 64<<10 { // an endless line is cut, not grown
					line = append(line, c)
				}
				continue
			}
			a := b.exec(in, string(bytes.TrimRight(line, "\r\n")))
			line = line[:0]
			if !b.act(ctx, in, a) {
				return
			}
		}
		if n > 0 {
			b.setBusy(in, len(line) > 0)
		}
		switch {
		case err == nil, errors.Is(err, os.ErrDeadlineExceeded):
		case errors.Is(err, os.ErrClosed):
			return
		case errors.Is(err, syscall.EIO):
			select { // no slave open: wait for a client
			case <-ctx.Done():
				return
			case <-time.After(20 * time.Millisecond):
			}
		default:
			select {
			case <-ctx.Done():
				return
			case <-time.After(50 * time.Millisecond):
			}
		}
	}
}

// lateWithin is the longest delay that simulated time models as a late
// reply (see act): one the client, waiting the profile's timeout T, gives
// up on and then meets while it resynchronises the line (within 2·T, the
// SCPI client's default sync bound), so 3·T. A reply held longer leaves the
// client's resync unanswered too: the instrument is unresponsive.
func lateWithin(p profile.Profile) time.Duration {
	t, _ := time.ParseDuration(p.Timeout)
	return 3 * t
}

// act delays, writes the reply and hangs up as a command's outcome says.
// It reports false when the bench is stopping.
func (b *Bench) act(ctx context.Context, in *instrument, a action) bool {
	if a.delay > 0 {
		// The line is idle while the reply is held, and what clients
		// write meanwhile waits unread (as on a busy instrument) without
		// holding time back; the clock wakes the line.
		b.mu.Lock()
		in.busy, in.holding = false, true
		b.mu.Unlock()
		wctx, release := context.WithCancel(ctx)
		if clock.IsSimulated(b.clock) && a.delay <= lateWithin(in.prof) {
			// In simulated time the clock stands still while the client
			// waits for this reply (its read timeout runs in real time),
			// so the reply's time would come only after the client's next
			// sleep. A late reply is one the client gave up on: once it
			// writes its next command line the held reply goes out, before
			// that line's reply, as a late reply does on a real line. (A
			// longer delay holds the line until its time, as before.)
			go func() {
				for wctx.Err() == nil && in.pty.unread() == 0 {
					time.Sleep(time.Millisecond)
				}
				release()
			}()
		}
		done, err := clock.Passive(wctx, b.clock, b.clock.Now().Add(a.delay))
		release()
		b.mu.Lock()
		in.busy, in.holding = true, false
		b.mu.Unlock()
		done()
		if err != nil && ctx.Err() != nil {
			return false
		}
	}
	if a.reply != nil {
		in.pty.master.SetWriteDeadline(time.Now().Add(time.Second))
		if _, err := in.pty.master.Write(a.reply); errors.Is(err, os.ErrClosed) {
			return false
		}
	}
	if a.hangup {
		in.pty.hangup()
	}
	return true
}

func (b *Bench) setBusy(in *instrument, v bool) {
	b.mu.Lock()
	in.busy = v
	b.mu.Unlock()
}

// exec runs one command line (commands separated by ";") and returns what
// to send back, spoiled by any armed reply fault.
func (b *Bench) exec(in *instrument, line string) action {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.advance()
	in.cmds++
	b.commandFaults(in)
	var replies []string
	for _, cmd := range strings.Split(line, ";") {
		cmd = normalize(cmd)
		if cmd == "" {
			continue
		}
		if r, ok := b.command(in, cmd); ok {
			replies = append(replies, r)
		}
	}
	var a action
	if in.hangupDue { // the line dies before the reply
		in.hangupDue = false
		return action{hangup: true}
	}
	if len(replies) == 0 {
		return a
	}
	a.reply = []byte(strings.Join(replies, ";") + in.outTerm)
	b.spoil(in, &a)
	return a
}

// command runs one command and returns its reply, if it is a query.
func (b *Bench) command(in *instrument, cmd string) (string, bool) {
	up := strings.ToUpper(cmd)
	if strings.HasPrefix(up, "*") {
		return b.common(in, up)
	}
	if q := normalize(in.prof.ErrorQuery); q != "" && up == strings.ToUpper(q) {
		return in.st.pop().String(), true
	}
	m, arg, ok := match(in.ms, cmd)
	if !ok {
		in.st.push(b.unmatched(in, up))
		return "", false
	}
	switch m.name {
	case opPoll:
		return m.op.PollDone, true
	case opLiteral:
		return "", false
	}
	if m.query {
		r, e := b.query(in, m)
		if e != nil {
			in.st.push(*e)
			return "", false
		}
		return encodeReply(m.op, r), true
	}
	var v value
	if m.arg {
		var e *scpiError
		if v, e = decodeArg(m.op, arg); e != nil {
			in.st.push(*e)
			return "", false
		}
	}
	if e := b.set(in, m.name, v); e != nil {
		in.st.push(*e)
	}
	return "", false
}

// unmatched tells a missing or surplus parameter from an unknown header.
func (b *Bench) unmatched(in *instrument, up string) scpiError {
	for _, m := range in.ms {
		if m.arg && strings.TrimSpace(m.prefix) == up {
			return errMissingParam
		}
		if !m.arg && strings.HasPrefix(up, m.prefix+" ") {
			return errParamNotAllow
		}
	}
	return errUndefHeader
}

// common runs an IEEE 488.2 common command.
func (b *Bench) common(in *instrument, up string) (string, bool) {
	head, arg, _ := strings.Cut(up, " ")
	switch head {
	case "*IDN?":
		return idn(in.prof.Identity, in.role, in.serial), true
	case "*RST":
		b.reset(in)
	case "*CLS":
		in.st.queue, in.st.esr = nil, 0
	case "*OPC":
		in.st.esr |= esrOPC
	case "*OPC?":
		return "1", true
	case "*TRG":
		b.trigger(in)
	case "*WAI":
	case "*ESR?":
		v := in.st.esr
		in.st.esr = 0
		return strconv.Itoa(v), true
	case "*ESE":
		n, err := strconv.Atoi(strings.TrimSpace(arg))
		if err != nil || n < 0 || n > 255 {
			in.st.push(errDataType)
			break
		}
		in.st.ese = n
	case "*ESE?":
		return strconv.Itoa(in.st.ese), true
	case "*STB?":
		return strconv.Itoa(in.st.stb()), true
	case "*TST?":
		return "0", true
	default:
		in.st.push(errUndefHeader)
	}
	return "", false
}

// reset is *RST: the role's power-on settings. The supply goes to zero
// setpoint with output off; a trip is cleared once the winding has cooled.
func (b *Bench) reset(in *instrument) {
	r := b.rig
	switch in.role {
	case instr.RoleSupply:
		r.Supply.Setpoint, r.Supply.Output, r.Supply.Ramp = 0, false, 0
		r.Supply.ClearTrip()
	case instr.RoleIntegrator:
		r.Integrator.Range = r.P.Integrator.RangeWb
		r.ResetIntegrator()
	case instr.RoleFieldMeter:
		r.FieldMeter.Range = r.P.FieldMeter.RangeT
	}
}

// set runs a setting operation of the role.
func (b *Bench) set(in *instrument, name string, v value) *scpiError {
	if strings.HasPrefix(name, bufPrefix) {
		return b.bufferedSet(in, name, v)
	}
	if strings.HasPrefix(name, rampPrefix) {
		return b.rampSet(name, v)
	}
	r := b.rig
	switch name {
	case profile.OpSetCurrent:
		if abs(v.Num) > r.P.Supply.MaxCurrentA {
			return &errOutOfRange
		}
		r.Supply.Setpoint = v.Num
	case profile.OpSetOutput:
		on := v.Key == "true" || v.Key == "1" || (v.Key == "" && v.Num != 0)
		if on && r.Supply.Tripped {
			return &errSettings // re-arm with *RST once cooled
		}
		r.Supply.Output = on
	case profile.OpReset:
		r.ResetIntegrator()
	case profile.OpSetRange:
		if !(v.Num > 0) {
			return &errOutOfRange
		}
		if in.role == instr.RoleIntegrator {
			r.Integrator.Range = v.Num
		} else {
			r.FieldMeter.Range = v.Num
		}
	case profile.OpZero:
		r.ZeroField()
	default:
		return &errUndefHeader
	}
	return nil
}

// query runs a query operation of the role.
func (b *Bench) query(in *instrument, m matcher) (reply, *scpiError) {
	if strings.HasPrefix(m.name, bufPrefix) {
		return b.bufferedQuery(in, m)
	}
	r := b.rig
	switch m.name {
	case profile.OpReadCurrent:
		return reply{Num: b.currentNow()}, nil
	case profile.OpReadVoltage:
		return reply{Num: r.Supply.V}, nil
	case profile.OpReadStatus:
		return reply{Int: b.statusRegister(m.op)}, nil
	case profile.OpReadFlux:
		return reply{Num: r.ReadFlux(in.noise.NormFloat64())}, nil
	case profile.OpReadOverload:
		return reply{Bool: r.Integrator.Overload}, nil
	case profile.OpReadField:
		v, ok := r.ReadField(in.noise.NormFloat64())
		return reply{Num: v, Overflow: !ok}, nil
	case profile.OpReadTemperature:
		return reply{Num: r.ReadTemperature(in.noise.NormFloat64())}, nil
	}
	return reply{}, &errUndefHeader
}

// statusRegister builds the supply's condition register with the bit
// numbers the profile names (compliance, overtemp, trip, output).
func (b *Bench) statusRegister(op profile.Operation) int {
	s := b.rig.Supply
	v := 0
	for meaning, bit := range op.Bits {
		var on bool
		switch meaning {
		case "compliance":
			on = s.Compliance
		case "overtemp":
			on = s.OverTemp
		case "trip":
			on = s.Tripped
		case "output":
			on = s.Output
		}
		if on && bit >= 0 && bit < 31 {
			v |= 1 << bit
		}
	}
	return v
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}
