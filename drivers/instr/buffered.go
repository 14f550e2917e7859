package instr

import (
	"context"
	"hystd/calib/units"
	"time"
)

// BufferPlan is a timed acquisition: Count readings, Period apart on the
// instrument's own time base, the first Delay after the trigger.
type BufferPlan struct {
	Period time.Duration
	Count  int
	Delay  time.Duration
}

// Buffered is an integrator or field meter that can sample on its own time
// base and hand the readings over as one block (hardware-timed capture).
// drivers/profile implements it for every profile; CanBuffer says whether
// the profile defines the operations.
type Buffered interface {
	CanBuffer() bool
	// ArmBuffer programs the acquisition and waits for the trigger.
	ArmBuffer(ctx context.Context, p BufferPlan) error
	// TriggerBuffer starts the armed acquisition; at is when the trigger
	// was sent, on the caller's clock, unc its uncertainty.
	TriggerBuffer(ctx context.Context) (at time.Time, unc time.Duration, err error)
	// BufferDone reports whether all readings have been taken.
	BufferDone(ctx context.Context) (bool, error)
	// FetchBuffer returns the readings, in SI; exactly count of them.
	FetchBuffer(ctx context.Context, count int) ([]float64, error)
	// HasBufferClock reports whether ReadBufferClock works; without it the
	// instrument's time base is taken to run at the caller's rate, within
	// BufferClockAccuracy.
	HasBufferClock() bool
	// ReadBufferClock reads the instrument's time base, in seconds.
	ReadBufferClock(ctx context.Context) (Reading, error)
	// BufferClockAccuracy is the time base's rate error, a fraction.
	BufferClockAccuracy() float64
	// BufferTriggerLatency is the instrument's own latency between
	// receiving the trigger and starting to count the programmed delay, on
	// its time base (0 when its profile states none).
	BufferTriggerLatency() time.Duration
	// HasTriggerTime reports whether ReadTriggerTime works.
	HasTriggerTime() bool
	// ReadTriggerTime reads when the last trigger took effect, in seconds
	// on the instrument's time base (that of ReadBufferClock).
	ReadTriggerTime(ctx context.Context) (float64, error)
}

// Ramper is a supply that can ramp its output to each new setpoint at a
// programmed rate (a continuous ramp). drivers/profile implements it for
// every supply profile; CanRamp says whether the profile defines it.
type Ramper interface {
	CanRamp() bool
	// SetRampRate programs the rate, A/s, of the setpoints that follow.
	SetRampRate(ctx context.Context, rate units.AmperePerSecond) error
	// RampOff ends the programmed ramp: setpoints apply at once again.
	RampOff(ctx context.Context) error
}
