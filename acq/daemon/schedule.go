package daemon

import (
	"context"
	"time"

	"hystd/acq/record"
	"hystd/drivers/clock"
)

// schedule submits the fixture's scheduled recipes when they are due, on the
// daemon's clock, until ctx ends. A run due while another is under way waits
// in the queue.
func (d *Daemon) schedule(ctx context.Context, lf LoadedFixture) {
	log := d.log.With("fixture", lf.Name)
	for {
		now := d.deps.Clock.Now()
		var next time.Time
		var due Scheduled
		for _, s := range lf.Schedule {
			if t := s.Next(now); next.IsZero() || t.Before(next) {
				next, due = t, s
			}
		}
		log.Info("next scheduled run", "at", next, "recipe", due.RecipeFile)
		// Passive: on simulated time the scheduler is no actor of its own
		// (time moves when the engine sleeps).
		done, err := clock.Passive(ctx, d.deps.Clock, next)
		done()
		if err != nil {
			return
		}
		id, err := d.SubmitNamed(ctx, lf.Name, due.RecipeFile, due.Recipe.Text(), "schedule", func(r record.Run, err error) {
			log.Info("scheduled run ended", "run", r.ID, "state", r.State, "reason", r.Reason)
		})
		if err != nil {
			log.Error("scheduled recipe refused", "recipe", due.RecipeFile, "err", err)
		} else {
			log.Info("scheduled run queued", "run", id, "recipe", due.RecipeFile)
		}
	}
}
