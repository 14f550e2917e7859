package clock

import (
	"context"
	"sync"
	"time"
)

// Manual is a Clock that moves only when told: Advance moves it on and
// wakes the passive waiters that are due; SleepUntil jumps straight to its
// time (the caller is the only one who would make time pass, as in an
// in-memory fake where nothing else runs). It is safe for concurrent use.
type Manual struct {
	mu      sync.Mutex
	now     time.Time
	waiters []manualWaiter
}

type manualWaiter struct {
	at time.Time
	ch chan time.Time
}

var _ Clock = (*Manual)(nil)

// NewManual returns a clock standing at t.
func NewManual(t time.Time) *Manual { return &Manual{now: t} }

// Now returns the clock's time.
func (c *Manual) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

// SleepUntil jumps to t (if later), waking the waiters due by then, and
// returns ctx's error.
func (c *Manual) SleepUntil(ctx context.Context, t time.Time) error {
	c.mu.Lock()
	if t.After(c.now) {
		c.setLocked(t)
	}
	c.mu.Unlock()
	return ctx.Err()
}

// Advance moves the clock on by d, wakes the waiters that are due and
// returns the new time.
func (c *Manual) Advance(d time.Duration) time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.setLocked(c.now.Add(d))
	return c.now
}

// After returns a channel that receives once the clock has reached Now()+d.
func (c *Manual) After(d time.Duration) <-chan time.Time {
	c.mu.Lock()
	at := c.now.Add(d)
	c.mu.Unlock()
	return c.after(at)
}

func (c *Manual) after(at time.Time) <-chan time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	ch := make(chan time.Time, 1)
	if !at.After(c.now) {
		ch <- c.now
		return ch
	}
	c.waiters = append(c.waiters, manualWaiter{at, ch})
	return ch
}

// Waiters returns how many passive waits are pending (tests use it to know
// that a delayed reply is being held).
func (c *Manual) Waiters() int {
	c.mu.Lock()
	defer c.mu.Unlock()
	return len(c.waiters)
}

func (c *Manual) setLocked(t time.Time) {
	c.now = t
	kept := c.waiters[:0]
	for _, w := range c.waiters {
		if !w.at.After(c.now) {
			w.ch <- c.now
		} else {
			kept = append(kept, w)
		}
	}
	c.waiters = kept
}
