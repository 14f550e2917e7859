package daemon

import (
	"context"
	"log/slog"

	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/fixture"
	"hystd/acq/process"
	"hystd/calib/units"
	"hystd/drivers/clock"
)

// FixtureOpener opens a fixture's instruments through their profiles
// (acq/fixture) and builds the loop processing for the mounted specimen with
// the profiles' accuracies and the calibration records in force for the
// instruments it found (fixture.Opened.Calibrations). Geometry warnings are
// logged.
func FixtureOpener(log *slog.Logger) Opener { return FixtureOpenerClock(log, clock.Real{}) }

// FixtureOpenerClock is FixtureOpener with the drivers on clk (the
// engine's clock; see fixture.OpenClock).
func FixtureOpenerClock(log *slog.Logger, clk clock.Clock) Opener {
	return func(ctx context.Context, fx config.Fixture, sp config.Specimen, cals []calrec.Record) (Opened, error) {
		o, err := fixture.OpenClock(ctx, fx, log, clk)
		if err != nil {
			return Opened{}, err
		}
		used, evs, err := o.Calibrations(cals, fx, clk.Now())
		if err != nil {
			o.Close()
			return Opened{}, err
		}
		proc, warnings, err := o.Processor(fx, sp, used)
		if err != nil {
			o.Close()
			return Opened{}, err
		}
		for _, w := range warnings {
			log.Warn(w, "fixture", fx.Name, "specimen", sp.ID)
		}
		return Opened{Instruments: o.Instruments, Process: proc, Close: o.Close, Calibrations: used, CalibrationEvents: evs, Notes: o.Notes}, nil
	}
}

// SpecimenArea is the specimen's cross-section as the processing computes
// it, for the live B estimate; 0 when it cannot be computed.
func SpecimenArea(fx config.Fixture, sp config.Specimen) units.SquareMetre {
	s, _, err := process.SetupFrom(fx, sp)
	if err != nil {
		return 0
	}
	return s.Area
}

// FixtureHalter halts a fixture's supply alone through its profile
// (fixture.HaltSupply).
func FixtureHalter(log *slog.Logger, clk clock.Clock) Halter {
	return func(ctx context.Context, fx config.Fixture) (string, error) {
		return fixture.HaltSupply(ctx, fx, log, clk)
	}
}
