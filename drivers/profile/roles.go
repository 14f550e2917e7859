package profile

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"hystd/calib/units"
	"hystd/drivers/instr"
)

// Supply is a current supply driven by a profile.
type Supply struct {
	*Device
	last    float64 // last setpoint sent, A
	haveSet bool
	output  bool // last output state set
}

// Integrator is an electronic integrator driven by a profile.
type Integrator struct{ *Device }

// FieldMeter is a Hall-probe field meter driven by a profile.
type FieldMeter struct{ *Device }

// Thermometer is a temperature channel driven by a profile.
type Thermometer struct{ *Device }

var (
	_ instr.Supply      = (*Supply)(nil)
	_ instr.Integrator  = (*Integrator)(nil)
	_ instr.FieldMeter  = (*FieldMeter)(nil)
	_ instr.Thermometer = (*Thermometer)(nil)

	_ instr.Overlapped = (*Supply)(nil)
	_ instr.Overlapped = (*Integrator)(nil)
	_ instr.Overlapped = (*FieldMeter)(nil)
	_ instr.Overlapped = (*Thermometer)(nil)
	_ instr.Queued     = (*Supply)(nil)
	_ instr.Queued     = (*Integrator)(nil)
	_ instr.Queued     = (*FieldMeter)(nil)
	_ instr.Queued     = (*Thermometer)(nil)
)

func attach(ctx context.Context, role string, p Profile, port Port, o Options) (*Device, error) {
	if p.Role != role {
		return nil, fmt.Errorf("profile %s is a %s profile, not a %s", p.Name, p.Role, role)
	}
	return newDevice(ctx, p, port, o)
}

// NewSupply identifies the supply on port, sends its init sequence and
// returns it. The Supply owns port and closes it in Close; when NewSupply
// fails, the port stays the caller's to close. p is validated again (a
// profile built in code gets the same checks as one loaded from a file).
func NewSupply(ctx context.Context, p Profile, port Port, o Options) (*Supply, error) {
	d, err := attach(ctx, instr.RoleSupply, p, port, o)
	if err != nil {
		return nil, err
	}
	return &Supply{Device: d}, nil
}

// NewIntegrator is NewSupply for an integrator.
func NewIntegrator(ctx context.Context, p Profile, port Port, o Options) (*Integrator, error) {
	d, err := attach(ctx, instr.RoleIntegrator, p, port, o)
	if err != nil {
		return nil, err
	}
	return &Integrator{d}, nil
}

// NewFieldMeter is NewSupply for a field meter.
func NewFieldMeter(ctx context.Context, p Profile, port Port, o Options) (*FieldMeter, error) {
	d, err := attach(ctx, instr.RoleFieldMeter, p, port, o)
	if err != nil {
		return nil, err
	}
	return &FieldMeter{d}, nil
}

// NewThermometer is NewSupply for a thermometer.
func NewThermometer(ctx context.Context, p Profile, port Port, o Options) (*Thermometer, error) {
	d, err := attach(ctx, instr.RoleThermometer, p, port, o)
	if err != nil {
		return nil, err
	}
	return &Thermometer{d}, nil
}

// SetCurrent sets the output current in A. A value outside the profile's
// set_current range is a *RangeError and nothing is sent.
func (s *Supply) SetCurrent(ctx context.Context, i units.Ampere) error {
	sent, err := s.setSent(ctx, OpSetCurrent, float64(i))
	// After an error the command may or may not have been applied: keep the
	// larger magnitude, so that Halt never underestimates the current.
	if sent && (err == nil || !s.haveSet || math.Abs(float64(i)) > math.Abs(s.last)) {
		s.last, s.haveSet = float64(i), true
	}
	return err
}

// ReadCurrent reads the output current, A.
func (s *Supply) ReadCurrent(ctx context.Context) (instr.Reading, error) {
	return s.read(ctx, OpReadCurrent)
}

// ReadVoltage reads the output voltage, V.
func (s *Supply) ReadVoltage(ctx context.Context) (instr.Reading, error) {
	return s.read(ctx, OpReadVoltage)
}

// SetOutput switches the output on or off.
func (s *Supply) SetOutput(ctx context.Context, on bool) error {
	err := s.set(ctx, OpSetOutput, on)
	if err == nil {
		s.output = on
	}
	return err
}

// Status reads the status register named by read_status and decodes the
// bits the profile names. Without an output bit, OutputOn is the last
// state set. Without read_status it returns ErrUnsupported.
func (s *Supply) Status(ctx context.Context) (instr.SupplyStatus, error) {
	v, err := s.readInt(ctx, OpReadStatus)
	if err != nil {
		return instr.SupplyStatus{}, err
	}
	bits := s.p.Operations[OpReadStatus].Bits
	bit := func(name string) bool {
		n, ok := bits[name]
		return ok && v&(1<<n) != 0
	}
	st := instr.SupplyStatus{Compliance: bit("compliance"), OverTemp: bit("overtemp"), Tripped: bit("trip"), RawRegister: v, OutputOn: s.output, TripClear: s.p.TripClear}
	if _, ok := bits["output"]; ok {
		st.OutputOn = bit("output")
	}
	return st, nil
}

// Limits returns the limits the profile states: the largest magnitude of
// the set_current range, the top of the read_voltage range (0 when the
// profile gives none) and the halt slew.
func (s *Supply) Limits() instr.SupplyLimits {
	r := s.p.Operations[OpSetCurrent].Range
	l := instr.SupplyLimits{MaxCurrent: units.Ampere(math.Max(math.Abs(r[0]), math.Abs(r[1]))), MaxSlew: units.AmperePerSecond(s.haltSlew())}
	if vr := s.p.Operations[OpReadVoltage].Range; len(vr) == 2 {
		l.MaxVoltage = units.Volt(vr[1])
	}
	return l
}

func (s *Supply) haltSlew() float64 {
	if s.o.HaltSlew > 0 && s.o.HaltSlew < s.p.HaltSlew {
		return s.o.HaltSlew
	}
	return s.p.HaltSlew
}

// HaltPlan returns the setpoints, in A, Halt steps through from i0 to zero
// at slew A/s in steps of period: |ΔI| ≤ slew·period per step, the last
// step exactly 0.
func HaltPlan(i0, slew float64, period time.Duration) []float64 {
	step := slew * period.Seconds()
	if !(step > 0) || i0 == 0 || math.IsNaN(i0) {
		return []float64{0}
	}
	n := int(math.Ceil(math.Abs(i0)/step - 1e-9))
	n = max(n, 1)
	out := make([]float64, n)
	for k := 1; k <= n; k++ {
		out[k-1] = i0 * (1 - float64(k)/float64(n))
	}
	out[n-1] = 0
	return out
}

// DefaultHaltSettle bounds Halt's wait for the current to fall near zero
// after its last ramp setpoint, unless Options.HaltSettle says otherwise.
const DefaultHaltSettle = 5 * time.Second

// haltZero is the read-back current, A, that Halt takes as zero:
// Options.HaltZero, or 5 mA plus the read_current accuracy's offset (its
// 95 % zero error), so that a read-back at zero is never taken for current.
func (s *Supply) haltZero() float64 {
	if s.o.HaltZero > 0 {
		return s.o.HaltZero
	}
	tol := 0.005
	if a := s.p.Operations[OpReadCurrent].Accuracy; a != nil {
		tol += a.Offset
	}
	return tol
}

// Halt brings the supply to zero current and output off: it reads the
// current (or, failing that, uses the last setpoint sent), ramps it to zero
// at the halt slew (the profile's halt_slew_a_per_s, or Options.HaltSlew if
// lower) in steps of halt_period, then reads the current back every
// halt_period until it is within Options.HaltZero of zero (the winding's
// current lags the setpoint by its L/R time), for at most
// Options.HaltSettle, and only then sends the safe-state sequence. If the
// current never gets there, or cannot be read back, the safe state is sent
// all the same and the error says so, with the last current read.
//
// Caution: the magnetizing winding stores ½·L·I²; switching the output off
// or breaking the circuit at full current drives a high voltage across the
// winding and the supply. Halt therefore ramps first and only then switches
// off. It is no substitute for the supply's own protection, a discharge path
// across the winding or the lab's interlocks; wire and operate the fixture
// as local electrical-safety codes and licensed practice require.
//
// Halt is safe to call at any time and repeatedly. It does not stop when ctx
// is cancelled (a half-done ramp-down is worse than a finished one); it is
// bounded instead by the ramp time plus 10 s and by ctx's deadline (at
// least HaltReconnectWithin from the call). A port found lost is
// reconnected once, within HaltReconnectWithin; if that fails, every
// command of the sequence fails at once. Errors are returned after the
// whole sequence was attempted.
func (s *Supply) Halt(ctx context.Context) error {
	defer s.beginHalt()()
	ctx, stop := detached(ctx, HaltReconnectWithin)
	defer stop()
	if err := s.ready(ctx); err != nil {
		return err
	}
	period, _ := time.ParseDuration(s.p.HaltPeriod)
	i0, known := s.last, s.haveSet
	var errs []error
	if r, err := s.ReadCurrent(ctx); err == nil {
		i0, known = r.Value, true
	} else {
		errs = append(errs, err)
	}
	if lim := float64(s.Limits().MaxCurrent); math.Abs(i0) > lim {
		// An implausible reading (beyond what the supply can be set to):
		// ramp from the limit, which takes longest and is never too fast.
		s.o.Log.Warn("halt: current reading beyond the supply's range; ramping from the range limit", "profile", s.p.Name, "read_a", i0, "limit_a", lim)
		i0 = math.Copysign(lim, i0)
	}
	slew := s.haltSlew()
	plan := []float64{}
	if known {
		plan = HaltPlan(i0, slew, period)
	}
	budget := time.Duration(len(plan))*period + 10*time.Second
	hctx, cancel := context.WithTimeout(ctx, budget)
	defer cancel()
	if known && i0 != 0 {
		s.o.Log.Warn("halting supply: ramping to zero", "profile", s.p.Name, "from_a", i0, "slew_a_per_s", slew, "steps", len(plan))
	}
	ramped := known
	for k, i := range plan {
		if err := s.SetCurrent(hctx, units.Ampere(i)); err != nil {
			errs = append(errs, fmt.Errorf("halt step %d/%d (%g A): %w", k+1, len(plan), i, err))
			var oe *OpError
			if !errors.As(err, &oe) || !oe.Reconnected {
				ramped = false
				break // the line is gone or the supply refuses: go to the safe state
			}
		}
		if k < len(plan)-1 {
			if err := s.o.Sleep(hctx, period); err != nil {
				errs = append(errs, err)
				ramped = false
				break
			}
		}
	}
	if ramped {
		if err := s.settle(hctx, period); err != nil {
			errs = append(errs, err)
		}
	}
	if err := s.haltSafe(hctx); err != nil {
		errs = append(errs, err)
	} else {
		s.output = false
		s.last, s.haveSet = 0, true
	}
	if len(errs) > 0 {
		s.o.Log.Error("supply halt had errors; check the supply by hand", "profile", s.p.Name, "err", errors.Join(errs...))
		return &OpError{Profile: s.p.Name, Op: "halt", Err: errors.Join(errs...)}
	}
	return nil
}

// settle reads the current back every period until it is within haltZero
// of zero, for at most Options.HaltSettle (DefaultHaltSettle).
func (s *Supply) settle(ctx context.Context, period time.Duration) error {
	limit := s.o.HaltSettle
	if limit <= 0 {
		limit = DefaultHaltSettle
	}
	tol := s.haltZero()
	var waited time.Duration
	for {
		r, err := s.ReadCurrent(ctx)
		if err != nil {
			return fmt.Errorf("halt: reading the current back after the ramp (output switched off without knowing it reached zero): %w", err)
		}
		if math.Abs(r.Value) <= tol {
			return nil
		}
		if waited >= limit || !(period > 0) {
			return fmt.Errorf("halt: the current still read %.4g A, beyond %.3g A of zero, %v after the last ramp setpoint; output switched off all the same — check the winding and its discharge path before touching the fixture", r.Value, tol, waited)
		}
		if err := s.o.Sleep(ctx, period); err != nil {
			return fmt.Errorf("halt: waiting for the current (%.4g A) to fall: %w", r.Value, err)
		}
		waited += period
	}
}

// Reset zeroes the integrated flux (reset operation, with its poll).
func (n *Integrator) Reset(ctx context.Context) error { return n.set(ctx, OpReset, nil) }

// SetRange selects the full scale, Wb-turns; a value outside the range (or
// not one of the mapped ranges) is rejected.
func (n *Integrator) SetRange(ctx context.Context, fullScale units.WeberTurn) error {
	return n.set(ctx, OpSetRange, float64(fullScale))
}

// ReadFlux reads ψ in Wb-turns.
func (n *Integrator) ReadFlux(ctx context.Context) (instr.Reading, error) {
	return n.read(ctx, OpReadFlux)
}

// Overloaded reports the overload flag (read_overload).
func (n *Integrator) Overloaded(ctx context.Context) (bool, error) {
	return n.readBool(ctx, OpReadOverload)
}

// ReadField reads B in T.
func (f *FieldMeter) ReadField(ctx context.Context) (instr.Reading, error) {
	return f.read(ctx, OpReadField)
}

// SetRange selects the full scale in T.
func (f *FieldMeter) SetRange(ctx context.Context, fullScale units.Tesla) error {
	return f.set(ctx, OpSetRange, float64(fullScale))
}

// Zero nulls the probe offset (zero operation).
func (f *FieldMeter) Zero(ctx context.Context) error { return f.set(ctx, OpZero, nil) }

// ReadTemperature reads the temperature in °C.
func (t *Thermometer) ReadTemperature(ctx context.Context) (instr.Reading, error) {
	return t.read(ctx, OpReadTemperature)
}
