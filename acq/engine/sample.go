package engine

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"hystd/acq/record"
	"hystd/acq/safety"
	"hystd/calib/units"
	"hystd/drivers/instr"
	"hystd/drivers/link"
)

// retry calls f again after a read timeout (the line is still up: a reply
// was lost or late) until ctx — bounded by the fixture's comm_timeout — ends.
// Any other error, a disconnect among them, is returned at once: after a
// hang-up the instrument's state cannot be trusted within a loop.
func retry[T any](ctx context.Context, f func(context.Context) (T, error)) (T, error) {
	for {
		v, err := f(ctx)
		if err == nil || !errors.Is(err, link.ErrTimeout) || ctx.Err() != nil {
			return v, err
		}
		if n, ok := ctx.Value(retriesKey{}).(*atomic.Int64); ok {
			n.Add(1)
		}
	}
}

// retriesKey carries the counter of re-read replies in a sample's context.
type retriesKey struct{}

// Instruments are the opened roles of one fixture. Supply is required; the
// others may be nil when the fixture lacks them. The engine uses each from
// one goroutine at a time; the caller keeps ownership and closes them.
type Instruments struct {
	Supply      instr.Supply
	Integrator  instr.Integrator
	FieldMeter  instr.FieldMeter
	Thermometer instr.Thermometer
}

// reading is one concurrent read of every channel.
type reading struct {
	s        record.Sample
	status   instr.SupplyStatus
	overload bool
	at       time.Time // mid-time of the supply's current reading
}

// roleError is an I/O error of one instrument role.
type roleError struct {
	role string
	err  error
}

func (e *roleError) Error() string { return fmt.Sprintf("%s: %v", e.role, e.err) }
func (e *roleError) Unwrap() error { return e.err }

// sampleAll sets the supply (when set is non-nil) and reads every channel,
// each instrument in its own goroutine, all started together. The first
// error is returned as a *roleError.
func sampleAll(ctx context.Context, in Instruments, set *float64) (reading, error) {
	var (
		r    reading
		wg   sync.WaitGroup
		mu   sync.Mutex
		errs []error
		ats  []instr.Reading
	)
	nan := math.NaN()
	r.s = record.Sample{I: nan, V: nan, Psi: nan, BProbe: nan, TempC: nan}
	fail := func(role string, err error) {
		mu.Lock()
		errs = append(errs, &roleError{role, err})
		mu.Unlock()
	}
	keep := func(rd instr.Reading) {
		mu.Lock()
		ats = append(ats, rd)
		mu.Unlock()
	}
	wg.Add(1)
	go func() {
		defer wg.Done()
		s := in.Supply
		if set != nil {
			if _, err := retry(ctx, func(ctx context.Context) (struct{}, error) {
				return struct{}{}, s.SetCurrent(ctx, units.Ampere(*set))
			}); err != nil {
				fail("supply", fmt.Errorf("set current %.6g A: %w", *set, err))
				return
			}
		}
		i, err := retry(ctx, s.ReadCurrent)
		if err != nil {
			fail("supply", fmt.Errorf("read current: %w", err))
			return
		}
		v, err := retry(ctx, s.ReadVoltage)
		if err != nil {
			fail("supply", fmt.Errorf("read voltage: %w", err))
			return
		}
		st, err := retry(ctx, s.Status)
		if err != nil {
			fail("supply", fmt.Errorf("read status: %w", err))
			return
		}
		r.s.I, r.s.V, r.status, r.at = i.Value, v.Value, st, i.At
		keep(i)
	}()
	if in.Integrator != nil {
		wg.Add(1)
		go func() {
			defer wg.Done()
			p, err := retry(ctx, in.Integrator.ReadFlux)
			if err != nil {
				fail("integrator", fmt.Errorf("read flux: %w", err))
				return
			}
			o, err := retry(ctx, in.Integrator.Overloaded)
			if err != nil {
				fail("integrator", fmt.Errorf("read overload: %w", err))
				return
			}
			r.s.Psi, r.overload = p.Value, o
			keep(p)
		}()
	}
	if in.FieldMeter != nil {
		wg.Add(1)
		go func() {
			defer wg.Done()
			b, err := retry(ctx, in.FieldMeter.ReadField)
			if err != nil {
				fail("field meter", fmt.Errorf("read field: %w", err))
				return
			}
			r.s.BProbe = b.Value
			keep(b)
		}()
	}
	if in.Thermometer != nil {
		wg.Add(1)
		go func() {
			defer wg.Done()
			t, err := retry(ctx, in.Thermometer.ReadTemperature)
			if err != nil {
				fail("thermometer", fmt.Errorf("read temperature: %w", err))
				return
			}
			r.s.TempC = t.Value
			keep(t)
		}()
	}
	wg.Wait()
	if len(errs) > 0 {
		return r, errors.Join(errs...)
	}
	// The sample's time is the supply current's; its uncertainty covers the
	// spread of the channels' mid-times and their own round trips.
	var unc time.Duration
	for _, a := range ats {
		d := a.At.Sub(r.at)
		if d < 0 {
			d = -d
		}
		unc = max(unc, d+a.AtUncertainty)
	}
	r.s.TUnc = unc
	return r, nil
}

// firstRole returns the role and error of the first failing instrument.
func firstRole(err error) (string, error) {
	var re *roleError
	if errors.As(err, &re) {
		return re.role, re.err
	}
	return "instruments", err
}

// violationOf turns a sampling error into the safety violation the run ends
// with: lost communication (no reply within comm_timeout, a hang-up, an
// unplugged port) or an error the instrument reported.
func violationOf(err error) *safety.Violation {
	role, e := firstRole(err)
	if errors.Is(e, link.ErrTimeout) || errors.Is(e, link.ErrDisconnected) || errors.Is(e, link.ErrClosed) ||
		errors.Is(e, link.ErrNotFound) || errors.Is(e, context.DeadlineExceeded) {
		return safety.Comm(role, e)
	}
	return safety.Instrument(role, e)
}
