package clock

import (
	"context"
	"time"
)

// Clock is a time source. Implementations are safe for concurrent use.
type Clock interface {
	// Now returns the present time (with a monotonic reading for Real).
	Now() time.Time
	// SleepUntil returns nil once t has come, or ctx's error if ctx ends
	// first. A t not after Now returns ctx.Err() at once.
	SleepUntil(ctx context.Context, t time.Time) error
}

// Sleep waits d on c (see Clock.SleepUntil).
func Sleep(ctx context.Context, c Clock, d time.Duration) error {
	return c.SleepUntil(ctx, c.Now().Add(d))
}

// Real is the machine's clock.
type Real struct{}

var _ Clock = Real{}

// Now returns time.Now.
func (Real) Now() time.Time { return time.Now() }

// SleepUntil waits for t or ctx with a timer.
func (Real) SleepUntil(ctx context.Context, t time.Time) error {
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

// IsSimulated reports whether c runs in simulated time (a *Sim, or a
// *Remote served from one), where a wait on the wall clock says nothing
// about the clock's progress.
func IsSimulated(c Clock) bool {
	_, ok := c.(interface{ simulated() })
	return ok
}

// Passive waits, on c, until t without holding c's time back: on a *Sim the
// waiter is not an actor (the bench's delayed replies wait this way), and
// once it is woken time stands still until it calls done (after it has
// acted, e.g. written its reply). On a *Manual it waits for Advance; on any
// other clock it is SleepUntil. done is never nil.
func Passive(ctx context.Context, c Clock, t time.Time) (done func(), err error) {
	switch c := c.(type) {
	case *Sim:
		return c.passive(ctx, t)
	case *Manual:
		select {
		case <-c.after(t):
			return func() {}, nil
		case <-ctx.Done():
			return func() {}, ctx.Err()
		}
	}
	return func() {}, c.SleepUntil(ctx, t)
}
