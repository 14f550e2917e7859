package profile

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"slices"
	"strconv"
	"strings"
	"sync/atomic"
	"time"

	"hystd/drivers/instr"
	"hystd/drivers/link"
	"hystd/drivers/scpi"
)

// Errors a profile instrument returns, matched with errors.Is. Transport
// errors keep matching link.ErrTimeout / link.ErrDisconnected and instrument
// errors *scpi.InstrumentError (errors.As).
var (
	// ErrOverrange: the instrument reported overflow (±9.9E37, ±INF) or
	// not-a-number for a reading.
	ErrOverrange = errors.New("instrument reports overrange")
	// ErrIdentity: the *IDN? reply does not contain the expected identity.
	ErrIdentity = errors.New("wrong instrument")
	// ErrUnsupported: the profile does not define the operation.
	ErrUnsupported = errors.New("operation not in profile")
)

// OpError is the failure of one operation of one instrument.
type OpError struct {
	Profile string
	Op      string // operation name, e.g. read_current; or "identify", "init", "halt"
	Command string // the command sent, when one was
	// Reconnected is true when the port had gone away during the operation
	// and was reconnected and re-identified afterwards: the operation itself
	// still failed, the next one can succeed.
	Reconnected bool
	Err         error
}

func (e *OpError) Error() string {
	s := e.Profile + " " + e.Op
	if e.Command != "" {
		s += " (" + e.Command + ")"
	}
	s += ": " + e.Err.Error()
	if e.Reconnected {
		s += " [port reconnected]"
	}
	return s
}

func (e *OpError) Unwrap() error { return e.Err }

// RangeError is a setpoint or a reading outside the operation's range.
type RangeError struct {
	Value    float64
	Min, Max float64
	Unit     string
	Reading  bool // a reading out of range, not a setpoint
}

func (e *RangeError) Error() string {
	what := "setpoint"
	if e.Reading {
		what = "reading"
	}
	return fmt.Sprintf("%s %g %s outside the valid range [%g, %g] %s (rejected, not clamped)", what, e.Value, e.Unit, e.Min, e.Max, e.Unit)
}

// Port is what an instrument needs of its transport: *link.Conn, or
// scpitest.Script in tests. The instrument owns it and closes it in Close.
type Port interface {
	scpi.Stream
	Reconnect(ctx context.Context) error
	Close() error
}

// Options tune a profile instrument; the zero value is usable.
type Options struct {
	// Identity overrides the profile's identity (fixture config).
	Identity string
	// HaltSlew, when positive and below the profile's, is the ramp rate
	// Halt uses (the fixture's limit).
	HaltSlew float64 // A/s
	// HaltSettle bounds how long Halt waits, after its last ramp setpoint,
	// for the read-back current to fall near zero; 0: DefaultHaltSettle.
	HaltSettle time.Duration
	// HaltZero is the read-back current, A, Halt takes as zero; 0: 5 mA
	// plus the offset of the read_current accuracy.
	HaltZero float64
	// Log receives warnings (reconnects, halts) and, at Debug level, every
	// SCPI exchange. nil: slog.Default().
	Log *slog.Logger
	// Sleep waits for settle times, poll periods and halt steps; nil uses
	// a timer. Tests inject it.
	Sleep func(ctx context.Context, d time.Duration) error
	// Now stamps readings; nil is time.Now (monotonic).
	Now func() time.Time
	// ReconnectWithin bounds a reconnect after a disconnect (default 10 s).
	ReconnectWithin time.Duration
	// Carried are error-queue entries an earlier, failed open of the same
	// instrument read (QueueEntries): the first PollErrors returns them,
	// before what this open finds.
	Carried []instr.InstrumentError
}

// Device is the part common to every role: the SCPI client on its port,
// identification, init and safe-state sequences, and the generic set and
// read of an operation. Not safe for concurrent use: one goroutine owns it.
type Device struct {
	p      Profile
	port   Port
	c      *scpi.Client
	o      Options
	ident  string
	idn    string // the last *IDN? reply, as read at identification
	failed error  // set when a reconnect found the wrong instrument
	// unverified is set when a reconnect succeeded but identification or
	// init did not: the next operation repeats them before anything else.
	unverified bool
	// reconnects counts the port's reconnects after a loss (Reconnects).
	reconnects atomic.Int64
	// pending are error-queue entries found when the port was opened, for
	// the next PollErrors.
	pending []instr.InstrumentError
	// lost is the failed reconnect that left the port gone (a vanished
	// device, a bench that died): until a reconnect succeeds, an operation
	// meeting the disconnect fails at once instead of waiting another
	// ReconnectWithin, so an ending on a vanished port is not one reconnect
	// window per command. A Halt tries one reconnect more (haltTry).
	lost error
	// halting is set during Halt; haltTry, the one reconnect (within
	// HaltReconnectWithin) that Halt may still try.
	halting, haltTry bool
}

// HaltReconnectWithin bounds the one reconnect a Halt tries when it finds
// the port lost: long enough for a USB serial adapter that was jostled to
// come back, short enough that stopping the daemon on a bench whose ports
// have vanished takes seconds, not a reconnect window per command.
const HaltReconnectWithin = time.Second

// beginHalt marks the device as halting until the returned function is
// called: one reconnect of at most HaltReconnectWithin, whatever happened
// before.
func (d *Device) beginHalt() (end func()) {
	d.halting, d.haltTry = true, true
	return func() { d.halting, d.haltTry = false, false }
}

// detached is ctx without its cancellation but with its deadline, if any,
// and at least minLeft from now: a halt goes on after an abort, but not
// past the time its caller gave it (which may have run out: then minLeft,
// so that the halt is tried at all).
func detached(ctx context.Context, minLeft time.Duration) (context.Context, context.CancelFunc) {
	c := context.WithoutCancel(ctx)
	if dl, ok := ctx.Deadline(); ok {
		if floor := time.Now().Add(minLeft); dl.Before(floor) {
			dl = floor
		}
		return context.WithDeadline(c, dl)
	}
	return context.WithCancel(c)
}

// identifyTries is how often start asks *IDN? before it concludes that the
// instrument answering is not the expected one.
const identifyTries = 3

func newDevice(ctx context.Context, p Profile, port Port, o Options) (*Device, error) {
	if err := Validate(p); err != nil {
		return nil, err
	}
	p = normalize(p)
	if o.Log == nil {
		o.Log = slog.Default()
	}
	if o.Sleep == nil {
		o.Sleep = sleepCtx
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	if o.ReconnectWithin <= 0 {
		o.ReconnectWithin = 10 * time.Second
	}
	d := &Device{p: p, port: port, o: o, ident: p.Identity, pending: append([]instr.InstrumentError(nil), o.Carried...)}
	if o.Identity != "" {
		d.ident = o.Identity
	}
	syncReply := p.SyncReply
	if p.SyncQuery == "*IDN?" && o.Identity != "" && syncReply == p.Identity {
		syncReply = o.Identity
	}
	d.c = scpi.New(port, scpi.Options{
		Name: p.Name, WriteTerm: p.Terminators.Write, ReadTerm: p.Terminators.Read,
		ErrorQuery: p.ErrorQuery, Log: o.Log, Now: o.Now, Timeout: p.LineSettings().ReadTimeout,
		SyncQuery: p.SyncQuery, SyncReply: func(l string) bool { return strings.Contains(l, syncReply) },
		Queued: p.Queued(),
	})
	if err := d.start(ctx); err != nil {
		return d, err
	}
	return d, nil
}

// start flushes the input (a previous process, or the instrument before a
// reconnect, may have left replies on the line), identifies the instrument
// and sends the init sequence. A reply line that is not an identity is
// taken for a stale one and discarded; lines but no identity within the
// sync timeout is ErrIdentity, naming what the instrument said.
func (d *Device) start(ctx context.Context) error {
	d.c.Forget()
	if n, err := d.c.Drain(ctx); err != nil {
		return &OpError{Profile: d.p.Name, Op: "identify", Command: "(flush input)", Err: err}
	} else if n > 0 {
		d.o.Log.Warn("stale input discarded before identification", "profile", d.p.Name, "bytes", n)
	}
	// A reply spoiled on the line (a flipped byte) is not another
	// instrument: ask again before concluding so.
	var skipped []string
	var id string
	var err error
	for try := 0; try < identifyTries; try++ {
		if try > 0 { // the *IDN? itself is the sync: drain and ask again
			d.c.Forget()
			if _, err := d.c.Drain(ctx); err != nil {
				return &OpError{Profile: d.p.Name, Op: "identify", Command: "(flush input)", Err: err}
			}
		}
		var sk []string
		id, sk, err = d.c.QueryMatch(ctx, "*IDN?", func(l string) bool { return strings.Contains(l, d.ident) })
		skipped = append(skipped, sk...)
		if err == nil || ctx.Err() != nil || !errors.Is(err, link.ErrTimeout) || len(sk) == 0 {
			break // identified, or silent: asking again would not help
		}
	}
	if err != nil {
		if len(skipped) > 0 {
			return &OpError{Profile: d.p.Name, Op: "identify", Command: "*IDN?",
				Err: fmt.Errorf("%w: *IDN? replied %q, expected it to contain %q", ErrIdentity, skipped[len(skipped)-1], d.ident)}
		}
		return &OpError{Profile: d.p.Name, Op: "identify", Command: "*IDN?", Err: err}
	}
	// Errors raised while nobody listened (between runs, or before a
	// reconnect) are kept for the next PollErrors before the init sequence
	// (often *CLS) erases them.
	if d.p.ErrorQuery != "" {
		var ie *scpi.InstrumentError
		err := d.c.DrainErrors(ctx, "(found at open)")
		// A late reply of the error query, left on the line (by a killed
		// process, or an earlier attempt) and discarded by the flush.
		d.pending = append(d.pending, d.salvaged(" (in the queue when the port was opened)")...)
		switch {
		case errors.As(err, &ie):
			for _, e := range append([]scpi.QueueEntry{{Code: ie.Code, Msg: ie.Msg}}, ie.More...) {
				if e.Code != 0 {
					d.pending = append(d.pending, instr.InstrumentError{Code: e.Code, Msg: e.Msg + " (in the queue when the port was opened)", Fail: d.p.Severity(e.Code) == SeverityFail})
				}
			}
			d.o.Log.Warn("errors found in the instrument's queue when it was opened", "profile", d.p.Name, "err", ie)
		case err != nil:
			// The entries read are kept (the open's caller gets them with
			// a *QueueError): the failure is named without them.
			d.keepDrained(err, " (in the queue when the port was opened)")
			var de *scpi.DrainError
			if errors.As(err, &de) {
				err = de.Err
			}
			return &OpError{Profile: d.p.Name, Op: "identify", Command: d.p.ErrorQuery, Err: err}
		}
	}
	d.idn = id
	for _, cmd := range d.p.Init {
		if err := d.c.Set(ctx, cmd); err != nil {
			return &OpError{Profile: d.p.Name, Op: "init", Command: cmd, Err: err}
		}
	}
	return nil
}

// ready returns the error that stops every operation: a wrong instrument
// found after a reconnect, or identification and init still to be redone.
func (d *Device) ready(ctx context.Context) error {
	if d.failed != nil {
		return d.failed
	}
	if !d.unverified {
		return nil
	}
	if err := d.start(ctx); err != nil {
		if errors.Is(err, ErrIdentity) {
			d.failed = err
		}
		// Said as such: the cause (a hang-up) was reported to an
		// operation whose error may not reach anyone.
		return d.fail(ctx, "identify", "*IDN?", fmt.Errorf("identifying again after the port was lost and reconnected: %w", err))
	}
	d.unverified = false
	return nil
}

// Profile returns the (normalized) profile the device speaks.
func (d *Device) Profile() Profile { return d.p }

// LineBreaks returns how many exchanges broke off since the device was
// opened (a reply lost, late or spoiled, or a call cut short: the line
// is resynchronised before the next), without any I/O: for a run's
// record, as the read that met the fault may have been retried unseen or
// failed while the run was failing on another instrument.
func (d *Device) LineBreaks() int64 { return d.c.Breaks() }

// Reconnects returns how many times the port was lost and reconnected
// since the device was opened, without any I/O: for a run's record, as the
// operation that met the loss may have failed unseen.
func (d *Device) Reconnects() int64 { return d.reconnects.Load() }

// IdentityRead returns the *IDN? reply read when the device was last
// identified (at open or after a reconnect), without any I/O.
func (d *Device) IdentityRead() string { return d.idn }

// Identify returns the instrument's *IDN? reply.
func (d *Device) Identify(ctx context.Context) (string, error) {
	if err := d.ready(ctx); err != nil {
		return "", err
	}
	id, err := d.c.Identify(ctx)
	if err != nil {
		return "", d.fail(ctx, "identify", "*IDN?", err)
	}
	return id, nil
}

// Close closes the port. It does not Halt.
func (d *Device) Close() error { return d.port.Close() }

// haltSafe sends the safe-state sequence, every command even if one fails.
func (d *Device) haltSafe(ctx context.Context) error {
	var errs []error
	for _, cmd := range d.p.SafeState {
		if err := d.c.Set(ctx, cmd); err != nil {
			errs = append(errs, d.fail(ctx, "halt", cmd, err))
		}
	}
	return errors.Join(errs...)
}

// Halt sends the safe-state sequence. Supply overrides it with a ramp.
// A port found lost is reconnected once, within HaltReconnectWithin.
func (d *Device) Halt(ctx context.Context) error {
	defer d.beginHalt()()
	if err := d.ready(ctx); err != nil {
		return err
	}
	return d.haltSafe(ctx)
}

// fail wraps err; on a disconnect it reconnects, re-identifies and re-inits
// before returning, and says so in the error. After a failed reconnect it
// does not try again (the port is gone, see Device.lost), but for the one
// try of a Halt.
func (d *Device) fail(ctx context.Context, op, cmd string, err error) error {
	oe := &OpError{Profile: d.p.Name, Op: op, Command: cmd, Err: err}
	if !errors.Is(err, link.ErrDisconnected) || ctx.Err() != nil {
		return oe
	}
	within := d.o.ReconnectWithin
	switch {
	case d.halting && d.haltTry:
		d.haltTry = false
		within = min(within, HaltReconnectWithin)
	case d.lost != nil:
		oe.Err = errors.Join(err, fmt.Errorf("not reconnected again: %w", d.lost))
		return oe
	}
	rctx, cancel := context.WithTimeout(ctx, within)
	defer cancel()
	d.o.Log.Warn("instrument port lost; reconnecting", "profile", d.p.Name, "op", op, "within", within, "err", err)
	if rerr := d.port.Reconnect(rctx); rerr != nil {
		d.lost = fmt.Errorf("reconnect failed: %w", rerr)
		oe.Err = errors.Join(err, d.lost)
		return oe
	}
	d.lost = nil
	d.c.Forget()
	d.reconnects.Add(1)
	if serr := d.start(rctx); serr != nil {
		if errors.Is(serr, ErrIdentity) {
			d.failed = serr // never talk to a different instrument
		} else {
			d.unverified = true
		}
		oe.Err = errors.Join(err, fmt.Errorf("after reconnect: %w", serr))
		return oe
	}
	d.unverified = false
	d.o.Log.Info("instrument reconnected and re-identified", "profile", d.p.Name)
	oe.Reconnected = true
	return oe
}

func (d *Device) op(name string) (Operation, error) {
	o, ok := d.p.Operations[name]
	if !ok {
		return Operation{}, &OpError{Profile: d.p.Name, Op: name, Err: ErrUnsupported}
	}
	return o, nil
}

// command builds the command text of a setting for value v (nil: none).
func (d *Device) command(name string, o Operation, v any) (string, error) {
	if !strings.Contains(o.Set, "{}") {
		return o.Set, nil
	}
	var text string
	switch x := v.(type) {
	case bool:
		text = o.Map[strconv.FormatBool(x)]
	case float64:
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return "", &OpError{Profile: d.p.Name, Op: name, Err: fmt.Errorf("setpoint %v is not a finite number", x)}
		}
		if len(o.Range) == 2 && (x < o.Range[0] || x > o.Range[1]) {
			return "", &OpError{Profile: d.p.Name, Op: name, Err: &RangeError{Value: x, Min: o.Range[0], Max: o.Range[1], Unit: o.Unit}}
		}
		if len(o.Map) > 0 {
			t, err := pick(o.Map, x)
			if err != nil {
				return "", &OpError{Profile: d.p.Name, Op: name, Err: err}
			}
			text = t
			break
		}
		inst := x / o.Scale
		if strings.HasSuffix(o.Format, "d") {
			text = fmt.Sprintf(o.Format, int64(math.Round(inst)))
		} else {
			text = fmt.Sprintf(o.Format, inst)
		}
	default:
		return "", &OpError{Profile: d.p.Name, Op: name, Err: errors.New("this operation takes a value")}
	}
	return strings.Replace(o.Set, "{}", text, 1), nil
}

// pick finds the map entry whose key equals x (relative 1e-9).
func pick(m map[string]string, x float64) (string, error) {
	var allowed []string
	for k, v := range m {
		f, _ := strconv.ParseFloat(k, 64)
		if f == x || math.Abs(f-x) <= 1e-9*math.Max(math.Abs(f), math.Abs(x)) {
			return v, nil
		}
		allowed = append(allowed, k)
	}
	sortFloats(allowed)
	return "", fmt.Errorf("value %g is not one of the instrument's settings (%s)", x, strings.Join(allowed, ", "))
}

func sortFloats(s []string) {
	slices.SortFunc(s, func(a, b string) int {
		x, _ := strconv.ParseFloat(a, 64)
		y, _ := strconv.ParseFloat(b, 64)
		return cmp.Compare(x, y)
	})
}

// set performs a setting: range check, command, error queue, settle, poll.
func (d *Device) set(ctx context.Context, name string, v any) error {
	_, err := d.setSent(ctx, name, v)
	return err
}

// setSent is set that also tells whether the command may have reached the
// instrument (false: rejected before sending).
func (d *Device) setSent(ctx context.Context, name string, v any) (sent bool, err error) {
	if err := d.ready(ctx); err != nil {
		return false, err
	}
	o, err := d.op(name)
	if err != nil {
		return false, err
	}
	cmd, err := d.command(name, o, v)
	if err != nil {
		return false, err
	}
	return true, d.finishSet(ctx, name, o, cmd)
}

func (d *Device) finishSet(ctx context.Context, name string, o Operation, cmd string) error {
	if err := d.c.Set(ctx, cmd); err != nil {
		return d.fail(ctx, name, cmd, err)
	}
	if o.Settle != "" {
		s, _ := time.ParseDuration(o.Settle)
		if err := d.o.Sleep(ctx, s); err != nil {
			return &OpError{Profile: d.p.Name, Op: name, Command: cmd, Err: err}
		}
	}
	if o.Poll == "" {
		return nil
	}
	period, _ := time.ParseDuration(o.PollPeriod)
	limit, _ := time.ParseDuration(o.PollTimeout)
	var waited time.Duration
	for {
		r, err := d.c.Query(ctx, o.Poll)
		if err != nil {
			return d.fail(ctx, name, o.Poll, err)
		}
		if strings.TrimSpace(r) == o.PollDone {
			return nil
		}
		if waited >= limit {
			return &OpError{Profile: d.p.Name, Op: name, Command: o.Poll,
				Err: fmt.Errorf("not done after %v (last reply %q, want %q)", limit, r, o.PollDone)}
		}
		if err := d.o.Sleep(ctx, period); err != nil {
			return &OpError{Profile: d.p.Name, Op: name, Command: o.Poll, Err: err}
		}
		waited += period
	}
}

// query sends an operation's query and returns the reply with its stamps.
func (d *Device) query(ctx context.Context, name string) (Operation, scpi.Reply, error) {
	if err := d.ready(ctx); err != nil {
		return Operation{}, scpi.Reply{}, err
	}
	o, err := d.op(name)
	if err != nil {
		return o, scpi.Reply{}, err
	}
	r, err := d.c.QueryTimed(ctx, o.Query)
	if err != nil {
		return o, r, d.fail(ctx, name, o.Query, err)
	}
	return o, r, nil
}

// Begin sends the query of read r without waiting for its reply (see
// instr.Overlapped): the next call of r's method collects the reply.
func (d *Device) Begin(ctx context.Context, r instr.Read) error {
	if err := d.ready(ctx); err != nil {
		return err
	}
	o, err := d.op(string(r))
	if err != nil {
		return err
	}
	if err := d.c.Ask(ctx, o.Query); err != nil {
		return d.fail(ctx, string(r), o.Query, err)
	}
	return nil
}

// BeginBehind is Begin that keeps the reads begun and not yet collected
// when the profile's queued_queries allows one more (see instr.Queued):
// r's query goes out behind theirs and the read methods collect the
// replies in order.
func (d *Device) BeginBehind(ctx context.Context, r instr.Read) error {
	if err := d.ready(ctx); err != nil {
		return err
	}
	o, err := d.op(string(r))
	if err != nil {
		return err
	}
	if err := d.c.AskBehind(ctx, o.Query); err != nil {
		return d.fail(ctx, string(r), o.Query, err)
	}
	return nil
}

// Queued is the profile's queued_queries (see instr.Queued).
func (d *Device) Queued() int { return d.p.Queued() }

// Ready reports whether the reply of the read started by Begin is in (or
// its exchange failed), waiting at most wait.
func (d *Device) Ready(ctx context.Context, wait time.Duration) bool {
	return d.c.Await(ctx, wait)
}

// read performs a numeric query and returns the reading in SI.
func (d *Device) read(ctx context.Context, name string) (instr.Reading, error) {
	o, r, err := d.query(ctx, name)
	if err != nil {
		return instr.Reading{}, err
	}
	v, err := parseNumeric(o, r.Text)
	if err != nil {
		var pe *scpi.ParseError
		if errors.As(err, &pe) {
			// Not an answer to this query: the line is out of step. Never
			// a value: the next exchange resynchronises first.
			err = d.c.Desync(o.Query, err)
		}
		return instr.Reading{}, &OpError{Profile: d.p.Name, Op: name, Command: o.Query, Err: err}
	}
	at, unc := r.Mid()
	return instr.Reading{Value: v, Unit: o.Unit, At: at, AtUncertainty: unc}, nil
}

// parseNumeric turns a reply into an SI value following the operation.
func parseNumeric(o Operation, reply string) (float64, error) {
	text, factor := reply, 1.0
	switch {
	case o.Parse == "number":
	case o.Parse == "number-unit":
		num, suffix := splitSuffix(reply)
		f, ok := o.Suffixes[suffix]
		if len(o.Suffixes) == 0 {
			f, ok = 1, suffix == o.Unit
		}
		if !ok {
			return 0, &scpi.ParseError{Reply: reply, Want: "a number with a unit suffix " + suffixList(o)}
		}
		text, factor = num, f
	case strings.HasPrefix(o.Parse, "field:"):
		n, _ := strconv.Atoi(strings.TrimPrefix(o.Parse, "field:"))
		fields := strings.Split(reply, o.Separator)
		if n > len(fields) {
			return 0, &scpi.ParseError{Reply: reply, Want: fmt.Sprintf("at least %d fields separated by %q", n, o.Separator)}
		}
		text = fields[n-1]
	default:
		return 0, fmt.Errorf("parse %q does not give a number", o.Parse)
	}
	v, err := scpi.ParseNumber(text)
	if err != nil {
		var pe *scpi.ParseError
		if errors.As(err, &pe) {
			pe.Reply = reply
		}
		return 0, err
	}
	if math.IsInf(v, 0) || math.IsNaN(v) {
		return 0, fmt.Errorf("%w (reply %q)", ErrOverrange, reply)
	}
	v *= factor * o.Scale
	if len(o.Range) == 2 && (v < o.Range[0] || v > o.Range[1]) {
		return 0, &RangeError{Value: v, Min: o.Range[0], Max: o.Range[1], Unit: o.Unit, Reading: true}
	}
	return v, nil
}

// splitSuffix splits "12.5 mT" or "12.5mT" into number and suffix.
func splitSuffix(s string) (num, suffix string) {
	t := strings.TrimSpace(s)
	i := len(t)
	for i > 0 {
		c := t[i-1]
		if c >= '0' && c <= '9' || c == '.' || c == ' ' {
			break
		}
		i--
	}
	// An exponent letter belongs to the number only when digits follow it;
	// the loop stops at the last digit, so "1E3 T" keeps "1E3".
	return strings.TrimSpace(t[:i]), strings.TrimSpace(t[i:])
}

func suffixList(o Operation) string {
	if len(o.Suffixes) == 0 {
		return fmt.Sprintf("(%s)", o.Unit)
	}
	var s []string
	for k := range o.Suffixes {
		s = append(s, k)
	}
	slices.Sort(s)
	return "(" + strings.Join(s, ", ") + ")"
}

// readBool performs a bool query.
func (d *Device) readBool(ctx context.Context, name string) (bool, error) {
	o, r, err := d.query(ctx, name)
	if err != nil {
		return false, err
	}
	t := strings.TrimSpace(r.Text)
	if len(o.Map) > 0 {
		switch o.Map[t] {
		case "true":
			return true, nil
		case "false":
			return false, nil
		}
	} else {
		switch strings.ToUpper(t) {
		case "1", "ON":
			return true, nil
		case "0", "OFF":
			return false, nil
		}
	}
	return false, &OpError{Profile: d.p.Name, Op: name, Command: o.Query, Err: d.c.Desync(o.Query, &scpi.ParseError{Reply: r.Text, Want: "an on/off value"})}
}

// readInt performs an int query.
func (d *Device) readInt(ctx context.Context, name string) (int, error) {
	o, r, err := d.query(ctx, name)
	if err != nil {
		return 0, err
	}
	v, err := scpi.ParseInt(r.Text)
	if err != nil {
		return 0, &OpError{Profile: d.p.Name, Op: name, Command: o.Query, Err: d.c.Desync(o.Query, err)}
	}
	return v, nil
}

// PollErrors reads the instrument's error queue until it is empty (errors
// it raised by itself, between settings) and returns each entry with the
// severity the profile maps its code to. Without an error query it returns
// nothing.
func (d *Device) PollErrors(ctx context.Context) ([]instr.InstrumentError, error) {
	if d.p.ErrorQuery == "" {
		return nil, nil
	}
	if err := d.ready(ctx); err != nil {
		return nil, err
	}
	out := d.pending
	d.pending = nil
	err := d.c.DrainErrors(ctx, "(error poll)")
	// Entries whose reply came late (discarded by a resync, here or since
	// the last poll) are off the queue too.
	out = append(out, d.salvaged("")...)
	if err == nil {
		return out, nil
	}
	var ie *scpi.InstrumentError
	if !errors.As(err, &ie) {
		// Entries read before the failure are off the instrument's
		// queue: kept for the next poll, with those found before.
		// They are returned with the failure too (and kept): a caller
		// that gives up on the line can still name them.
		// The failure is named without them (they are returned, and
		// would be named twice).
		d.pending = out
		d.keepDrained(err, "")
		var de *scpi.DrainError
		if errors.As(err, &de) {
			err = de.Err
		}
		return append([]instr.InstrumentError(nil), d.pending...), d.fail(ctx, "poll_errors", d.p.ErrorQuery, err)
	}
	for _, e := range append([]scpi.QueueEntry{{Code: ie.Code, Msg: ie.Msg}}, ie.More...) {
		if e.Code == 0 {
			continue
		}
		out = append(out, instr.InstrumentError{Code: e.Code, Msg: e.Msg, Fail: d.p.Severity(e.Code) == SeverityFail})
	}
	return out, nil
}

// salvaged returns the error-queue entries the client found in late
// replies (scpi.Client.Salvaged), with note after each message.
func (d *Device) salvaged(note string) []instr.InstrumentError {
	var out []instr.InstrumentError
	for _, e := range d.c.Salvaged() {
		out = append(out, instr.InstrumentError{Code: e.Code, Msg: e.Msg + note, Fail: d.p.Severity(e.Code) == SeverityFail})
	}
	return out
}

// keepDrained adds to the pending errors the entries a failed drain read
// before it failed (scpi.DrainError), with note after each message.
func (d *Device) keepDrained(err error, note string) {
	var de *scpi.DrainError
	if !errors.As(err, &de) {
		return
	}
	for _, e := range de.Entries {
		if e.Code != 0 {
			d.pending = append(d.pending, instr.InstrumentError{Code: e.Code, Msg: e.Msg + note, Fail: d.p.Severity(e.Code) == SeverityFail})
		}
	}
}

// ErrorPollPeriod is the profile's error_poll period (0: never).
func (d *Device) ErrorPollPeriod() time.Duration { return d.p.ErrorPollPeriod() }

func sleepCtx(ctx context.Context, d time.Duration) error {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}
