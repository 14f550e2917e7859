package profile

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"time"

	"hystd/drivers/instr"
	"hystd/drivers/scpi"
)

// Buffered is the optional `buffered:` section of an integrator's or a
// field meter's profile: the operations of a timed acquisition, in which
// the instrument samples on its own time base at a programmed period and
// hands the readings over as one IEEE 488.2 definite-length block, instead
// of one query per reading. Without it the instrument is read by polling.
//
//	buffered:
//	  trigger: {set: "TRIG:SOUR BUS"}                                 # optional: select the trigger the run sends
//	  period:  {set: "ACQ:PER {}", format: "%.6E", unit: s, range: [1.0e-4, 1.0]}
//	  count:   {set: "ACQ:POIN {}", format: "%d", range: [1, 100000]}
//	  delay:   {set: "TRIG:DEL {}", format: "%.6E", unit: s, range: [0, 1]}  # optional
//	  arm:     {set: "INIT"}                                          # wait for the trigger
//	  start:   {set: "*TRG"}                                          # the trigger, sent at sweep start
//	  done:    {query: "ACQ:DONE?", parse: bool}
//	  fetch:   {query: "FETC:ARR?", data: float32-le, unit: Wb}
//	  clock:   {query: "SYST:CLOC?", parse: number, unit: s}          # optional: the instrument's time base
//	  clock_accuracy: 1.0e-4                                          # rate error of that time base, fraction
//
// Each entry but fetch is an Operation as in `operations:`. The engine
// arms (trigger, period, count, delay, arm), sends start at the sweep's
// first round, polls done, and fetches. Sample k is taken at
// trigger_latency + delay + k·period after the trigger on the instrument's
// clock (trigger_latency is the instrument's own, from its manual; delay is
// what the engine programs); clock, when given, is read
// at the trigger and after the acquisition so that the engine can convert
// instrument time to its own (see acq/engine).
type Buffered struct {
	Trigger Operation `yaml:"trigger"`
	Period  Operation `yaml:"period"`
	Count   Operation `yaml:"count"`
	Delay   Operation `yaml:"delay"`
	Arm     Operation `yaml:"arm"`
	Start   Operation `yaml:"start"`
	Done    Operation `yaml:"done"`
	Fetch   Fetch     `yaml:"fetch"`
	Clock   Operation `yaml:"clock"`
	// TriggerTime (optional, with clock) is the query of the instant the
	// last trigger took effect, in seconds on the instrument's time base:
	// the engine then places the trigger by the instrument's clock instead
	// of by the moment the trigger's command was written.
	TriggerTime Operation `yaml:"trigger_time"`
	// ClockAccuracy is the rate error of the instrument's time base as a
	// fraction (e.g. 1.0e-4 for 100 ppm); default 1e-4. Used for the time
	// uncertainty of the samples when clock is not given.
	ClockAccuracy float64 `yaml:"clock_accuracy"`
	// TriggerLatency is the instrument's own time from receiving the
	// trigger to starting the programmed delay, as its manual states it: a
	// duration with a unit ("2ms", "350us"), not negative, under 1 s.
	// Empty: none.
	TriggerLatency string `yaml:"trigger_latency"`
}

// Fetch is the query that returns the buffer as a definite-length block.
type Fetch struct {
	Query string `yaml:"query"`
	// Data is the block's array format: ascii (comma-separated numbers) or
	// float32-le, float32-be, float64-le, float64-be.
	Data  string  `yaml:"data"`
	Unit  string  `yaml:"unit"`  // SI unit after scaling: Wb (integrator) or T (field meter)
	Scale float64 `yaml:"scale"` // instrument unit → SI (default 1)
	// Accuracy of each value; default that of the role's polled reading.
	Accuracy *Accuracy `yaml:"accuracy"`
}

// DefaultClockAccuracy is the time-base rate error assumed when a profile
// gives none (100 ppm: a plain crystal oscillator, common practice).
const DefaultClockAccuracy = 1e-4

// bufferedUnit is the unit a role's buffer holds.
var bufferedUnit = map[string]string{instr.RoleIntegrator: "Wb", instr.RoleFieldMeter: "T"}

// validateBuffered checks the buffered section (called from validate).
func validateBuffered(p Profile, add func(string, string, ...any)) {
	b := p.Buffered
	if b == nil {
		return
	}
	unit, ok := bufferedUnit[p.Role]
	if !ok {
		add("buffered", "only for an integrator or a field meter, not %s", article(p.Role))
		return
	}
	validateBufferedSetting(add, "trigger", b.Trigger, false, false, "")
	validateBufferedSetting(add, "period", b.Period, true, true, "s")
	validateBufferedSetting(add, "count", b.Count, true, true, "")
	validateBufferedSetting(add, "delay", b.Delay, false, true, "s")
	validateBufferedSetting(add, "arm", b.Arm, true, false, "")
	validateBufferedSetting(add, "start", b.Start, true, false, "")
	validateBufferedRanges(add, b)
	validateBufferedQueries(add, b)
	validateFetch(add, b.Fetch, unit)
}

// validateBufferedSetting checks the setting buffered.<key>: whether it is
// required, whether it takes a value (numeric) and the unit of that value.
func validateBufferedSetting(add adder, key string, o Operation, required, numeric bool, unit string) {
	validateSectionSetting(add, "buffered."+key, o, required, numeric, unit)
}

// validateSectionSetting checks the setting at key of an optional section
// (buffered, ramp): whether it is required, whether it takes a value
// (numeric) and the unit of that value.
func validateSectionSetting(add adder, key string, o Operation, required, numeric bool, unit string) {
	switch {
	case o.Set == "" && o.Query == "":
		if required {
			add(key, "required: a setting (set:)")
		}
		return
	case o.Query != "" || o.Parse != "":
		add(key, "must be a setting (set:), not a query")
		return
	}
	n := strings.Count(o.Set, "{}")
	switch {
	case numeric && n != 1:
		add(key+".set", "%q: needs exactly one {} where the value goes", o.Set)
	case !numeric && n != 0:
		add(key+".set", "%q: this operation takes no value; remove {}", o.Set)
	}
	if o.Unit != unit {
		add(key+".unit", "%q: want %q", o.Unit, unit)
	}
	if numeric {
		if len(o.Range) != 2 || !(o.Range[0] < o.Range[1]) {
			add(key+".range", "required: [min, max] with min below max")
		}
		if o.Format != "" {
			if m := verbRE.FindAllString(o.Format, -1); len(m) != 1 || strings.Count(o.Format, "%") != 1 {
				add(key+".format", "%q: want one number verb such as %%g, %%.6E, %%d", o.Format)
			}
		}
	} else if o.Format != "" || o.Range != nil {
		add(key, "format and range are for settings with a value")
	}
	checkDur(add, key+".settle", o.Settle, false)
}

// validateBufferedRanges checks the ranges of period, count and delay
// against what a timed acquisition can be.
func validateBufferedRanges(add adder, b *Buffered) {
	if r := b.Period.Range; len(r) == 2 && !(r[0] > 0) {
		add("buffered.period.range", "the shortest period must be positive, got %g s", r[0])
	}
	if r := b.Count.Range; len(r) == 2 && (r[0] < 1 || r[1] > float64(scpi.MaxBlock)) {
		add("buffered.count.range", "want counts within 1..%d", scpi.MaxBlock)
	}
	if r := b.Delay.Range; len(r) == 2 && r[0] < 0 {
		add("buffered.delay.range", "a delay cannot be negative, got %g s", r[0])
	}
}

// validateBufferedQueries checks done, clock and clock_accuracy.
func validateBufferedQueries(add adder, b *Buffered) {
	if b.Done.Query == "" || b.Done.Set != "" {
		add("buffered.done", "required: a query (query:, parse: bool) that says the acquisition is complete")
	} else if b.Done.Parse != "bool" {
		add("buffered.done.parse", "%q: want bool", b.Done.Parse)
	}
	if b.Clock.Set != "" || (b.Clock.Query != "" && b.Clock.Parse != "number") {
		add("buffered.clock", "a query with parse: number, unit: s (the instrument's time base)")
	} else if b.Clock.Query != "" && b.Clock.Unit != "s" {
		add("buffered.clock.unit", "%q: want \"s\"", b.Clock.Unit)
	}
	if t := b.TriggerTime; t.Set != "" || t.Query != "" {
		switch {
		case t.Set != "" || t.Parse != "number" || t.Unit != "s":
			add("buffered.trigger_time", "a query with parse: number, unit: s (the trigger's instant on the instrument's clock)")
		case b.Clock.Query == "":
			add("buffered.trigger_time", "needs buffered.clock (to map the instrument's time onto the host's)")
		}
	}
	if !(b.ClockAccuracy >= 0 && b.ClockAccuracy < 0.01) {
		add("buffered.clock_accuracy", "%g: want a fraction within 0..0.01 (e.g. 1.0e-4 for 100 ppm)", b.ClockAccuracy)
	}
	if v := b.TriggerLatency; v != "" {
		d, err := time.ParseDuration(v)
		switch {
		case err != nil:
			add("buffered.trigger_latency", "%q is not a duration (use a unit: us, ms, s)", v)
		case d < 0 || d >= time.Second:
			add("buffered.trigger_latency", "%q: want a latency within 0..1s", v)
		}
	}
}

// validateFetch checks buffered.fetch; unit is the one the role's buffer
// holds.
func validateFetch(add adder, f Fetch, unit string) {
	if strings.TrimSpace(f.Query) == "" || strings.Contains(f.Query, "{}") {
		add("buffered.fetch.query", "required: the query whose reply is the buffer as a definite-length block")
	}
	if _, ok := scpi.ElementSize(f.Data); !ok {
		add("buffered.fetch.data", "%q: want one of %s", f.Data, scpi.ArrayFormats)
	}
	if f.Unit != unit {
		add("buffered.fetch.unit", "%q: want %q", f.Unit, unit)
	}
	if f.Scale != 0 && (math.IsNaN(f.Scale) || math.IsInf(f.Scale, 0)) {
		add("buffered.fetch.scale", "must be a finite non-zero number")
	}
	if f.Accuracy != nil && (f.Accuracy.Gain < 0 || f.Accuracy.Offset < 0) {
		add("buffered.fetch.accuracy", "gain and offset must not be negative")
	}
}

// CanBuffer reports whether the profile has a buffered section.
func (d *Device) CanBuffer() bool { return d.p.Buffered != nil }

// HasBufferClock reports whether the instrument's time base can be read.
func (d *Device) HasBufferClock() bool { return d.p.Buffered != nil && d.p.Buffered.Clock.Query != "" }

// BufferClockAccuracy is the rate error of the instrument's time base.
func (d *Device) BufferClockAccuracy() float64 {
	if d.p.Buffered == nil || d.p.Buffered.ClockAccuracy == 0 {
		return DefaultClockAccuracy
	}
	return d.p.Buffered.ClockAccuracy
}

// BufferTriggerLatency is the instrument's own trigger latency
// (buffered.trigger_latency), 0 when the profile states none.
func (d *Device) BufferTriggerLatency() time.Duration {
	if d.p.Buffered == nil {
		return 0
	}
	l, _ := time.ParseDuration(d.p.Buffered.TriggerLatency) // validated at load
	return l
}

func (d *Device) buffered(ctx context.Context, op string) (*Buffered, error) {
	if d.p.Buffered == nil {
		return nil, &OpError{Profile: d.p.Name, Op: op, Err: fmt.Errorf("%w: the profile has no buffered section", ErrUnsupported)}
	}
	if err := d.ready(ctx); err != nil {
		return nil, err
	}
	return d.p.Buffered, nil
}

// setWith performs a setting given by its Operation (not by name).
func (d *Device) setWith(ctx context.Context, name string, o Operation, v any) error {
	if o.Scale == 0 {
		o.Scale = 1
	}
	if o.Format == "" {
		o.Format = "%g"
	}
	cmd, err := d.command(name, o, v)
	if err != nil {
		return err
	}
	return d.finishSet(ctx, name, o, cmd)
}

// ArmBuffer programs a timed acquisition and arms it: the trigger source,
// the period, the count and the delay, then arm. The instrument then waits
// for TriggerBuffer.
func (d *Device) ArmBuffer(ctx context.Context, plan instr.BufferPlan) error {
	b, err := d.buffered(ctx, "buffer_arm")
	if err != nil {
		return err
	}
	if b.Trigger.Set != "" {
		if err := d.setWith(ctx, "buffer_trigger", b.Trigger, nil); err != nil {
			return err
		}
	}
	if err := d.setWith(ctx, "buffer_period", b.Period, plan.Period.Seconds()); err != nil {
		return err
	}
	if err := d.setWith(ctx, "buffer_count", b.Count, float64(plan.Count)); err != nil {
		return err
	}
	if b.Delay.Set != "" {
		if err := d.setWith(ctx, "buffer_delay", b.Delay, plan.Delay.Seconds()); err != nil {
			return err
		}
	} else if plan.Delay != 0 {
		return &OpError{Profile: d.p.Name, Op: "buffer_delay", Err: fmt.Errorf("%w: a trigger delay of %v was asked and the profile has no buffered.delay", ErrUnsupported, plan.Delay)}
	}
	return d.setWith(ctx, "buffer_arm", b.Arm, nil)
}

// TriggerBuffer sends the trigger and returns when it was sent, on the
// client's clock: the time the command's last byte was handed to the port,
// with the line's transmission time of the command (10 bits a byte at the
// profile's baud rate) or the write's own duration, the larger, as its
// uncertainty. The error queue is read afterwards, outside the stamp.
func (d *Device) TriggerBuffer(ctx context.Context) (at time.Time, unc time.Duration, err error) {
	b, err := d.buffered(ctx, "buffer_start")
	if err != nil {
		return time.Time{}, 0, err
	}
	cmd := b.Start.Set
	t0 := d.o.Now()
	if err := d.c.Write(ctx, cmd); err != nil {
		return time.Time{}, 0, d.fail(ctx, "buffer_start", cmd, err)
	}
	t1 := d.o.Now()
	unc = t1.Sub(t0)
	if baud := d.p.Serial.Baud; baud > 0 {
		unc = max(unc, time.Duration(float64(len(cmd)+len(d.p.Terminators.Write))*10/float64(baud)*float64(time.Second)))
	}
	if d.p.ErrorQuery != "" {
		if err := d.c.DrainErrors(ctx, cmd); err != nil {
			return t1, unc, d.fail(ctx, "buffer_start", cmd, err)
		}
	}
	return t1, unc, nil
}

// BufferDone asks whether the acquisition is complete.
func (d *Device) BufferDone(ctx context.Context) (bool, error) {
	b, err := d.buffered(ctx, "buffer_done")
	if err != nil {
		return false, err
	}
	r, err := d.c.Query(ctx, b.Done.Query)
	if err != nil {
		return false, d.fail(ctx, "buffer_done", b.Done.Query, err)
	}
	t := strings.TrimSpace(r)
	if len(b.Done.Map) > 0 {
		if v, ok := b.Done.Map[t]; ok {
			return v == "true", nil
		}
	} else {
		switch strings.ToUpper(t) {
		case "1", "ON":
			return true, nil
		case "0", "OFF":
			return false, nil
		}
	}
	return false, &OpError{Profile: d.p.Name, Op: "buffer_done", Command: b.Done.Query,
		Err: d.c.Desync(b.Done.Query, &scpi.ParseError{Reply: r, Want: "an on/off value"})}
}

// HasTriggerTime reports whether the instrument can tell when the last
// trigger took effect on its clock (buffered.trigger_time).
func (d *Device) HasTriggerTime() bool {
	return d.p.Buffered != nil && d.p.Buffered.TriggerTime.Query != ""
}

// ReadTriggerTime reads the instant the last trigger took effect, in
// seconds on the instrument's time base.
func (d *Device) ReadTriggerTime(ctx context.Context) (float64, error) {
	b, err := d.buffered(ctx, "buffer_trigger_time")
	if err != nil {
		return 0, err
	}
	q := b.TriggerTime.Query
	if q == "" {
		return 0, &OpError{Profile: d.p.Name, Op: "buffer_trigger_time", Err: fmt.Errorf("%w: no buffered.trigger_time", ErrUnsupported)}
	}
	r, err := d.c.Query(ctx, q)
	if err != nil {
		return 0, d.fail(ctx, "buffer_trigger_time", q, err)
	}
	v, err := scpi.ParseNumber(r)
	if err == nil && (math.IsInf(v, 0) || math.IsNaN(v)) {
		err = &scpi.ParseError{Reply: r, Want: "a finite time in seconds"}
	}
	if err != nil {
		return 0, &OpError{Profile: d.p.Name, Op: "buffer_trigger_time", Command: q, Err: d.c.Desync(q, err)}
	}
	return v, nil
}

// ReadBufferClock reads the instrument's time base (seconds on its own
// clock), stamped like any reading.
func (d *Device) ReadBufferClock(ctx context.Context) (instr.Reading, error) {
	b, err := d.buffered(ctx, "buffer_clock")
	if err != nil {
		return instr.Reading{}, err
	}
	if b.Clock.Query == "" {
		return instr.Reading{}, &OpError{Profile: d.p.Name, Op: "buffer_clock", Err: fmt.Errorf("%w: no buffered.clock", ErrUnsupported)}
	}
	r, err := d.c.QueryTimed(ctx, b.Clock.Query)
	if err != nil {
		return instr.Reading{}, d.fail(ctx, "buffer_clock", b.Clock.Query, err)
	}
	v, err := scpi.ParseNumber(r.Text)
	if err == nil && (math.IsInf(v, 0) || math.IsNaN(v)) {
		err = &scpi.ParseError{Reply: r.Text, Want: "a finite time in seconds"}
	}
	if err != nil {
		return instr.Reading{}, &OpError{Profile: d.p.Name, Op: "buffer_clock", Command: b.Clock.Query, Err: d.c.Desync(b.Clock.Query, err)}
	}
	at, unc := r.Mid()
	return instr.Reading{Value: v, Unit: "s", At: at, AtUncertainty: unc}, nil
}

// FetchBuffer reads the buffer: a definite-length block that must hold
// exactly count values in the profile's format, each finite. A block cut
// short, a malformed header, another count or a non-finite value is an
// error naming it; no values are returned with an error.
func (d *Device) FetchBuffer(ctx context.Context, count int) ([]float64, error) {
	b, err := d.buffered(ctx, "buffer_fetch")
	if err != nil {
		return nil, err
	}
	f := b.Fetch
	data, err := d.c.QueryBlock(ctx, f.Query)
	if err != nil {
		var pe *scpi.ParseError
		if errors.As(err, &pe) {
			err = d.c.Desync(f.Query, err)
		}
		return nil, d.fail(ctx, "buffer_fetch", f.Query, fmt.Errorf("buffer of %d values: %w", count, err))
	}
	vs, err := scpi.DecodeArray(data, f.Data, count)
	if err != nil {
		return nil, &OpError{Profile: d.p.Name, Op: "buffer_fetch", Command: f.Query, Err: err}
	}
	scale := f.Scale
	if scale == 0 {
		scale = 1
	}
	for i, v := range vs {
		if math.IsInf(v, 0) || math.IsNaN(v) || math.Abs(v) >= scpi.Overflow {
			return nil, &OpError{Profile: d.p.Name, Op: "buffer_fetch", Command: f.Query,
				Err: fmt.Errorf("%w: value %d of %d is %g", ErrOverrange, i+1, count, v)}
		}
		vs[i] = v * scale
	}
	return vs, nil
}

// BufferAccuracy is the accuracy of each buffered value: the fetch's own,
// else that of the role's polled reading.
func (d *Device) BufferAccuracy() (Accuracy, bool) {
	if b := d.p.Buffered; b != nil && b.Fetch.Accuracy != nil {
		return *b.Fetch.Accuracy, true
	}
	return d.p.ReadAccuracy()
}
