// Package instr holds the contracts between the acquisition engine and the
// instruments of a fixture. It has no implementation: drivers/profile builds
// these roles from instrument profiles, tests build them from fakes.
//
// Every method that talks to an instrument takes a context; cancelling it
// stops the call. Implementations are not required to be safe for concurrent
// use by several goroutines: one goroutine at a time uses an instrument (the
// engine, or the sampler, which reads several instruments from one goroutine
// through Overlapped).
package instr

import (
	"context"
	"time"

	"hystd/calib/units"
)

// Reading is one value read from an instrument.
//
// At is the midpoint between sending the request and receiving the reply,
// taken from Go's monotonic clock; AtUncertainty is half that round trip.
type Reading struct {
	Value         float64
	Unit          string
	At            time.Time
	AtUncertainty time.Duration
}

// Resource is what every instrument role has.
type Resource interface {
	// Identify returns the instrument's *IDN? reply.
	Identify(ctx context.Context) (string, error)
	// Halt brings the instrument to an inert state (for a supply: ramp to zero
	// at its slew limit, then output off). It must be safe to call at any time,
	// repeatedly, also after an error.
	Halt(ctx context.Context) error
	// Close releases the port. It does not Halt.
	Close() error
}

// InstrumentError is one entry of an instrument's own error queue. Fail is
// the severity its profile maps the code to: true ends a run as failed
// (after the safe ramp-down), false is a warning event.
type InstrumentError struct {
	Code int
	Msg  string
	Fail bool
}

// ErrorPoller is an instrument whose error queue can be read on its own,
// between settings, so that errors it raises by itself are seen.
type ErrorPoller interface {
	// PollErrors reads the error queue until it is empty.
	PollErrors(ctx context.Context) ([]InstrumentError, error)
	// ErrorPollPeriod is how often a run should poll; 0 never.
	ErrorPollPeriod() time.Duration
}

// SupplyStatus is the condition of a current supply.
type SupplyStatus struct {
	OutputOn    bool
	Compliance  bool // voltage limit reached: the current no longer follows the setpoint
	OverTemp    bool
	Tripped     bool // the supply shut its output down by itself
	RawRegister int
	// TripClear says what clears a latched trip (from the profile); "" when
	// unknown.
	TripClear string
}

// SupplyLimits are what the supply's profile says it can do.
type SupplyLimits struct {
	MaxCurrent units.Ampere
	MaxVoltage units.Volt
	MaxSlew    units.AmperePerSecond // used by Halt to ramp down
}

// Supply is a bipolar current supply driving the magnetizing winding.
type Supply interface {
	Resource
	// SetCurrent sets the output current. A value outside the profile's range
	// is rejected with an error, never clamped.
	SetCurrent(ctx context.Context, i units.Ampere) error
	ReadCurrent(ctx context.Context) (Reading, error)
	ReadVoltage(ctx context.Context) (Reading, error)
	SetOutput(ctx context.Context, on bool) error
	Status(ctx context.Context) (SupplyStatus, error)
	Limits() SupplyLimits
}

// Integrator is an electronic integrator (fluxmeter) on the search coil.
type Integrator interface {
	Resource
	// Reset zeroes the integrated flux linkage.
	Reset(ctx context.Context) error
	// SetRange selects the full scale, in Wb-turns (V·s).
	SetRange(ctx context.Context, fullScale units.WeberTurn) error
	// ReadFlux returns ψ in Wb-turns (V·s).
	ReadFlux(ctx context.Context) (Reading, error)
	// Overloaded reports whether the input left the selected range.
	Overloaded(ctx context.Context) (bool, error)
}

// FieldMeter is a Hall-probe field meter; it reads flux density in tesla.
type FieldMeter interface {
	Resource
	ReadField(ctx context.Context) (Reading, error)
	SetRange(ctx context.Context, fullScale units.Tesla) error
	// Zero nulls the probe offset; call it in a zero-field chamber.
	Zero(ctx context.Context) error
}

// Thermometer is an optional temperature channel (specimen or winding), in °C.
type Thermometer interface {
	Resource
	ReadTemperature(ctx context.Context) (Reading, error)
}

// Read names one read of a role, for Overlapped.Begin: the read method of
// the same name (ReadStatus is Supply.Status, ReadOverload
// Integrator.Overloaded). The names are the instrument profiles' operation
// names.
type Read string

// The reads of the roles.
const (
	ReadCurrent     Read = "read_current"
	ReadVoltage     Read = "read_voltage"
	ReadStatus      Read = "read_status"
	ReadFlux        Read = "read_flux"
	ReadOverload    Read = "read_overload"
	ReadField       Read = "read_field"
	ReadTemperature Read = "read_temperature"
)

// Overlapped is an instrument whose reads can be started ahead, so that one
// goroutine keeps a query in flight on each of several ports at once
// (drivers/profile's instruments are). Begin sends the query of read r and
// returns without waiting for the reply; the next call of r's method then
// collects that reply instead of asking again, stamped from the moment the
// query was sent to the moment its reply was complete. Ready reports,
// waiting at most wait (0: only looking), whether the reply is in or the
// exchange has failed, so that the read method returns at once. Any other
// call of the instrument in between abandons the started read.
type Overlapped interface {
	Begin(ctx context.Context, r Read) error
	Ready(ctx context.Context, wait time.Duration) bool
}

// Queued is an Overlapped instrument that may accept more than one query
// before its first reply is read, answering them in order. Queued tells
// how many (1: one at a time, BeginBehind is Begin). BeginBehind sends
// read r's query behind the reads begun and not yet collected when fewer
// than Queued are (otherwise it is Begin); the read methods then collect
// the replies in the order of the queries, Ready looking at the first
// one not collected. A reply that fails abandons the reads behind it.
type Queued interface {
	Overlapped
	Queued() int
	BeginBehind(ctx context.Context, r Read) error
}
