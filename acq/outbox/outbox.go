// Package outbox is what an operator does with loops the forwarder
// quarantined (the server refused them for good: a wrong URL path, bucket or
// schema): list them with the server's reason, and send them again once the
// cause is fixed. `hystd outbox` and the API's /api/v1/outbox use it.
package outbox

import (
	"context"
	"errors"
	"fmt"

	"hystd/acq/record"
	"hystd/acq/store"
)

// Store is the part of the store this package needs (*store.Store has it).
type Store interface {
	Quarantined(ctx context.Context, limit int) ([]store.OutboxEntry, error)
	Requeue(ctx context.Context, id int64) error
}

// ErrNothing is returned by Requeue when no quarantined loop matched.
var ErrNothing = errors.New("no quarantined loop")

// List returns every quarantined entry, oldest first.
func List(ctx context.Context, s Store) ([]store.OutboxEntry, error) {
	return s.Quarantined(ctx, 0)
}

// Requeue makes the quarantined entries of run runID (every run when runID
// is "") pending again, so the forwarder sends them on its next pass from
// their stored progress. It returns the entries requeued; none matching
// wraps ErrNothing (and record.ErrNotFound).
func Requeue(ctx context.Context, s Store, runID string) ([]store.OutboxEntry, error) {
	q, err := s.Quarantined(ctx, 0)
	if err != nil {
		return nil, err
	}
	var done []store.OutboxEntry
	for _, e := range q {
		if runID != "" && e.RunID != runID {
			continue
		}
		if err := s.Requeue(ctx, e.ID); err != nil {
			return done, fmt.Errorf("run %s loop %d: %w", e.RunID, e.Loop, err)
		}
		done = append(done, e)
	}
	if len(done) == 0 {
		if runID != "" {
			return nil, fmt.Errorf("run %s: %w: %w", runID, ErrNothing, record.ErrNotFound)
		}
		return nil, fmt.Errorf("%w: %w", ErrNothing, record.ErrNotFound)
	}
	return done, nil
}
