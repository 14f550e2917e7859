package engine

import (
	"time"

	"hystd/drivers/clock"
)

// Clock is the engine's time source: drivers/clock's, shared with the
// simulated bench and the drivers' stamps. Tests inject a clock that
// advances on its own instead of sleeping (clock.Manual) or simulated time
// (clock.Sim).
type Clock = clock.Clock

// RealClock is the wall and monotonic clock of the machine.
type RealClock = clock.Real

// SimCommTimeout is the least bound of one sample round in simulated time.
// The bound is kept in real time (simulated time stands still while the
// engine waits for a reply), so it must be generous enough that no load on
// the machine makes it expire while the bench is answering.
const SimCommTimeout = 10 * time.Second
