package engine

import (
	"context"
	"errors"
	"fmt"
	"math"

	"hystd/acq/record"
	"hystd/acq/safety"
	"hystd/acq/sampler"
	"hystd/calib/units"
	"hystd/drivers/instr"
)

// Instruments are the opened roles of one fixture. Supply is required; the
// others may be nil when the fixture lacks them. The engine uses each from
// one goroutine at a time; the caller keeps ownership and closes them.
type Instruments = instr.Set

// setThenRead sets the supply to set, A, and waits until that setting is
// complete — the command written and the supply's error queue drained
// (profile.Supply.SetCurrent returns only then) — and only then reads every
// channel at once through the sampler.
//
// Why in this order: setting the current inside the supply's goroutine
// while the integrator read ψ concurrently let some samples pair a flux read
// before the new setpoint with a current read after it, and others the
// reverse; on the steep part of a loop that is a skew of one setpoint step
// between H and B, a rate-proportional widening of the loop. Setting first
// makes every channel of a sample see the same setpoint; the remaining
// offsets between the channels' reads are kept per sample (DtI, DtB) and
// removed by interpolation in the processing.
//
// Errors are *sampler.RoleError; a late reply is read again within ctx.
func setThenRead(ctx context.Context, sup instr.Supply, smp *sampler.Sampler, set float64) (sampler.Reading, error) {
	if _, err := sampler.Retry(ctx, func(ctx context.Context) (struct{}, error) {
		return struct{}{}, sup.SetCurrent(ctx, units.Ampere(set))
	}); err != nil {
		nan := math.NaN()
		return sampler.Reading{Sample: record.Sample{I: nan, V: nan, Psi: nan, BProbe: nan, TempC: nan}},
			&sampler.RoleError{Role: instr.RoleLabel(instr.RoleSupply), Err: fmt.Errorf("set current %.6g A: %w", set, err)}
	}
	return smp.ReadAll(ctx)
}

// firstRole returns the role and error of the first failing instrument.
func firstRole(err error) (string, error) {
	var re *sampler.RoleError
	if errors.As(err, &re) {
		return re.Role, re.Err
	}
	return "instruments", err
}

// violationOf turns a sampling error into the safety violation the run ends
// with: lost communication (no reply within comm_timeout, a hang-up, an
// unplugged port) or an error the instrument reported.
func violationOf(err error) *safety.Violation {
	role, e := firstRole(err)
	if errors.Is(e, instr.ErrTimeout) || errors.Is(e, instr.ErrLost) || errors.Is(e, context.DeadlineExceeded) {
		return safety.Comm(role, e)
	}
	return safety.Instrument(role, e)
}
