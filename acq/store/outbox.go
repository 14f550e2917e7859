package store

import (
	"context"
	"database/sql"
	"fmt"
	"time"

	"hystd/acq/record"
)

// Outbox states.
const (
	StatePending     = "pending"
	StateDelivered   = "delivered"
	StateQuarantined = "quarantined"
)

// OutboxEntry is one stored loop waiting to be (or already) forwarded to the
// time-series database. Done counts the loop's points (in the forwarder's
// deterministic order) already acknowledged by the server.
type OutboxEntry struct {
	ID        int64
	RunID     string
	Loop      int
	Revision  int // the run revision whose loop it sends (1 for a run never re-processed)
	Created   time.Time
	Updated   time.Time
	State     string
	Done      int
	Attempts  int
	LastError string // the last failure, or the server's message for a quarantined entry
}

// Backlog summarizes the outbox.
type Backlog struct {
	Pending     int
	Oldest      time.Time // creation time of the oldest pending entry; zero when none
	Quarantined int
}

// Outbox is what the forwarder needs from a store: the queue of loops to
// send and the loops themselves. AddLoop creates a pending entry in the same
// transaction as the loop. Implementations are safe for concurrent use.
type Outbox interface {
	Run(ctx context.Context, id string) (record.Run, error)
	// LoopOf returns loop n of revision rev (OutboxEntry.Revision).
	LoopOf(ctx context.Context, runID string, n, rev int) (record.Loop, error)
	// Revisions gives the specimen and config of each revision (the
	// points of a later revision are tagged with its own).
	Revisions(ctx context.Context, runID string) ([]record.Revision, error)
	// Pending returns up to limit pending entries, oldest first.
	Pending(ctx context.Context, limit int) ([]OutboxEntry, error)
	// Progress records that the first done points of a pending entry are
	// acknowledged; done never decreases.
	Progress(ctx context.Context, id int64, done int) error
	// Delivered marks an entry completely delivered.
	Delivered(ctx context.Context, id int64) error
	// Retry counts a failed attempt and keeps the entry pending.
	Retry(ctx context.Context, id int64, msg string) error
	// Quarantine takes an entry out of the queue with the server's message.
	Quarantine(ctx context.Context, id int64, msg string) error
	Backlog(ctx context.Context) (Backlog, error)
}

const outboxCols = `id, run_id, loop_n, revision, created_ns, updated_ns, state, done, attempts, last_error`

func scanEntry(sc interface{ Scan(...any) error }) (OutboxEntry, error) {
	var e OutboxEntry
	var c, u int64
	err := sc.Scan(&e.ID, &e.RunID, &e.Loop, &e.Revision, &c, &u, &e.State, &e.Done, &e.Attempts, &e.LastError)
	e.Created, e.Updated = time.Unix(0, c).UTC(), time.Unix(0, u).UTC()
	return e, err
}

func (s *Store) entries(ctx context.Context, state string, limit int) ([]OutboxEntry, error) {
	if limit <= 0 {
		limit = 1000
	}
	rows, err := s.r.QueryContext(ctx, "SELECT "+outboxCols+" FROM outbox WHERE state = ? ORDER BY id LIMIT ?", state, limit)
	if err != nil {
		return nil, fmt.Errorf("store: outbox: %w", err)
	}
	defer rows.Close()
	var out []OutboxEntry
	for rows.Next() {
		e, err := scanEntry(rows)
		if err != nil {
			return nil, fmt.Errorf("store: outbox: %w", err)
		}
		out = append(out, e)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store: outbox: %w", err)
	}
	return out, nil
}

// Pending returns up to limit pending entries, oldest first (limit ≤ 0: 1000).
func (s *Store) Pending(ctx context.Context, limit int) ([]OutboxEntry, error) {
	return s.entries(ctx, StatePending, limit)
}

// Quarantined returns up to limit quarantined entries, oldest first.
func (s *Store) Quarantined(ctx context.Context, limit int) ([]OutboxEntry, error) {
	return s.entries(ctx, StateQuarantined, limit)
}

// Entry returns one outbox entry; record.ErrNotFound if unknown.
func (s *Store) Entry(ctx context.Context, id int64) (OutboxEntry, error) {
	e, err := scanEntry(s.r.QueryRowContext(ctx, "SELECT "+outboxCols+" FROM outbox WHERE id = ?", id))
	if err == sql.ErrNoRows {
		return OutboxEntry{}, fmt.Errorf("store: outbox entry %d: %w", id, record.ErrNotFound)
	}
	if err != nil {
		return OutboxEntry{}, fmt.Errorf("store: outbox entry %d: %w", id, err)
	}
	return e, nil
}

// update changes one pending entry; record.ErrNotFound when no pending entry has the id.
func (s *Store) update(ctx context.Context, id int64, what, set string, args ...any) error {
	args = append([]any{s.now().UnixNano()}, args...)
	args = append(args, id)
	res, err := s.w.ExecContext(ctx, "UPDATE outbox SET updated_ns = ?, "+set+" WHERE id = ? AND state = 'pending'", args...)
	if err != nil {
		return fmt.Errorf("store: outbox entry %d: %s: %w", id, what, err)
	}
	if n, _ := res.RowsAffected(); n != 1 {
		return fmt.Errorf("store: outbox entry %d: %s: no pending entry: %w", id, what, record.ErrNotFound)
	}
	return nil
}

// Progress records that the first done points of entry id are acknowledged.
func (s *Store) Progress(ctx context.Context, id int64, done int) error {
	if done < 0 {
		return fmt.Errorf("store: outbox entry %d: progress %d < 0", id, done)
	}
	return s.update(ctx, id, "progress", "done = MAX(done, ?)", done)
}

// Delivered marks entry id delivered.
func (s *Store) Delivered(ctx context.Context, id int64) error {
	return s.update(ctx, id, "delivered", "state = 'delivered', last_error = ''")
}

// Retry counts a failed attempt on entry id and keeps it pending.
func (s *Store) Retry(ctx context.Context, id int64, msg string) error {
	return s.update(ctx, id, "retry", "attempts = attempts + 1, last_error = ?", msg)
}

// Quarantine moves entry id out of the queue, keeping msg.
func (s *Store) Quarantine(ctx context.Context, id int64, msg string) error {
	return s.update(ctx, id, "quarantine", "state = 'quarantined', attempts = attempts + 1, last_error = ?", msg)
}

// Requeue puts a quarantined entry back into the queue (after the cause was
// fixed on the server); it resumes after the points already acknowledged.
// The message of the last failure is kept.
func (s *Store) Requeue(ctx context.Context, id int64) error {
	res, err := s.w.ExecContext(ctx, "UPDATE outbox SET state = 'pending', updated_ns = ? WHERE id = ? AND state = 'quarantined'",
		s.now().UnixNano(), id)
	if err != nil {
		return fmt.Errorf("store: outbox entry %d: requeue: %w", id, err)
	}
	if n, _ := res.RowsAffected(); n != 1 {
		return fmt.Errorf("store: outbox entry %d: requeue: no quarantined entry: %w", id, record.ErrNotFound)
	}
	return nil
}

// Backlog counts pending and quarantined entries and dates the oldest pending one.
func (s *Store) Backlog(ctx context.Context) (Backlog, error) {
	var b Backlog
	var oldest sql.NullInt64
	err := s.r.QueryRowContext(ctx, `SELECT
		(SELECT COUNT(*) FROM outbox WHERE state = 'pending'),
		(SELECT MIN(created_ns) FROM outbox WHERE state = 'pending'),
		(SELECT COUNT(*) FROM outbox WHERE state = 'quarantined')`).Scan(&b.Pending, &oldest, &b.Quarantined)
	if err != nil {
		return Backlog{}, fmt.Errorf("store: outbox backlog: %w", err)
	}
	b.Oldest = timeOf(oldest)
	return b, nil
}
