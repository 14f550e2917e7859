package engine

import (
	"context"
	"time"
)

// Clock is the engine's time source. Tests inject a clock that advances on
// its own instead of sleeping.
type Clock interface {
	Now() time.Time
	// SleepUntil returns when t has come or ctx is done (with ctx's error).
	SleepUntil(ctx context.Context, t time.Time) error
}

// RealClock is the wall and monotonic clock of the machine.
type RealClock struct{}

// Now returns time.Now (with its monotonic reading).
func (RealClock) Now() time.Time { return time.Now() }

// SleepUntil waits for t or ctx.
func (RealClock) SleepUntil(ctx context.Context, t time.Time) error {
	d := time.Until(t)
	if d <= 0 {
		return ctx.Err()
	}
	tm := time.NewTimer(d)
	defer tm.Stop()
	select {
	case <-tm.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}
