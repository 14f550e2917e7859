// Package memstore is an in-memory store with the same contract as the
// SQLite store (record.Reader, record.Writer, store.Outbox) and the same
// shared test suite (acq/store/storetest). It keeps nothing across restarts:
// use it in tests of code that consumes a store, never as a record of truth.
//
// A *Store is safe for concurrent use. Values are copied in and out, so
// callers may change what they passed or received.
package memstore

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"slices"
	"sort"
	"strings"
	"sync"
	"time"

	"hystd/acq/record"
	"hystd/acq/store"
)

type loopKey struct {
	run string
	rev int
	n   int
}

// Store is an in-memory store. The zero value is not usable; call New.
type Store struct {
	mu     sync.RWMutex
	now    func() time.Time
	runs   map[string]record.Run
	loops  map[loopKey]record.Loop
	events map[string][]record.Event
	revs   map[string][]record.Revision // of re-processed runs, revision 1 first
	outbox []store.OutboxEntry          // in id order
	nextID int64
}

var (
	_ record.Reader  = (*Store)(nil)
	_ record.Writer  = (*Store)(nil)
	_ store.Outbox   = (*Store)(nil)
	_ record.Reviser = (*Store)(nil)
)

// New returns an empty store; now stamps outbox entries (nil: time.Now).
func New(now func() time.Time) *Store {
	if now == nil {
		now = time.Now
	}
	return &Store{now: now, runs: map[string]record.Run{}, loops: map[loopKey]record.Loop{}, events: map[string][]record.Event{}, revs: map[string][]record.Revision{}}
}

func validState(st record.State) error {
	switch st {
	case record.Queued, record.Running, record.Finished, record.Aborted, record.Failed:
		return nil
	}
	return fmt.Errorf("unknown state %q", st)
}

// CreateRun stores a new run (see store.Store.CreateRun).
func (s *Store) CreateRun(_ context.Context, r record.Run) error {
	if strings.TrimSpace(r.ID) == "" {
		return errors.New("memstore: create run: empty run id")
	}
	if r.State == "" {
		r.State = record.Queued
	}
	if err := validState(r.State); err != nil {
		return fmt.Errorf("memstore: create run %s: %w", r.ID, err)
	}
	sum := sha256.Sum256([]byte(r.Config))
	if h := hex.EncodeToString(sum[:]); r.ConfigHash == "" {
		r.ConfigHash = h
	} else if !strings.EqualFold(r.ConfigHash, h) {
		return fmt.Errorf("memstore: create run %s: config hash %s is not the SHA-256 of the config snapshot (%s)", r.ID, r.ConfigHash, h)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if _, ok := s.runs[r.ID]; ok {
		return fmt.Errorf("memstore: create run %s: %w", r.ID, store.ErrExists)
	}
	r.Revision = 1
	s.runs[r.ID] = r
	return nil
}

// SetState moves a run to st (see store.Store.SetState).
func (s *Store) SetState(_ context.Context, id string, st record.State, reason string, at time.Time) error {
	if err := validState(st); err != nil {
		return fmt.Errorf("memstore: run %s: %w", id, err)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	r, ok := s.runs[id]
	if !ok {
		return fmt.Errorf("memstore: run %s: %w", id, record.ErrNotFound)
	}
	if r.State.Ended() {
		return fmt.Errorf("memstore: run %s has already ended (%s); cannot set %s", id, r.State, st)
	}
	r.State = st
	switch {
	case st == record.Running:
		if r.Started.IsZero() {
			r.Started = at
		}
	case st.Ended():
		r.Reason, r.Ended = reason, at
	}
	s.runs[id] = r
	return nil
}

// AddEvent appends an event to a run.
func (s *Store) AddEvent(_ context.Context, e record.Event) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if _, ok := s.runs[e.RunID]; !ok {
		return fmt.Errorf("memstore: event for run %s: %w", e.RunID, record.ErrNotFound)
	}
	s.events[e.RunID] = append(s.events[e.RunID], e)
	return nil
}

func copyLoop(l record.Loop, samples bool) record.Loop {
	l.Figures = slices.Clone(l.Figures)
	l.Corrections = slices.Clone(l.Corrections)
	l.Verdicts = slices.Clone(l.Verdicts)
	if samples {
		l.Raw = slices.Clone(l.Raw)
		l.Points = slices.Clone(l.Points)
		if l.Raw == nil {
			l.Raw = []record.Sample{}
		}
		if l.Points == nil {
			l.Points = []record.Point{}
		}
	} else {
		l.Raw, l.Points = nil, nil
	}
	return l
}

// AddLoop stores a loop and its outbox entry at once (see store.Store.AddLoop).
func (s *Store) AddLoop(_ context.Context, l record.Loop) error {
	if l.N < 1 {
		return fmt.Errorf("memstore: loop of run %s: loop number %d, want ≥ 1", l.RunID, l.N)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if _, ok := s.runs[l.RunID]; !ok {
		return fmt.Errorf("memstore: loop %d of run %s: run: %w", l.N, l.RunID, record.ErrNotFound)
	}
	if err := s.addLoop(l); err != nil {
		return fmt.Errorf("memstore: loop %d of run %s: %w", l.N, l.RunID, err)
	}
	return nil
}

// addLoop stores l (of revision l.Revision, 0 read as 1; a later
// revision's raw samples are dropped, they stay with revision 1) and its
// outbox entry. The caller holds the write lock.
func (s *Store) addLoop(l record.Loop) error {
	l.Revision = max(l.Revision, 1)
	k := loopKey{l.RunID, l.Revision, l.N}
	if _, ok := s.loops[k]; ok {
		return store.ErrExists
	}
	if l.Revision > 1 {
		l.Raw = nil
	}
	s.loops[k] = copyLoop(l, true)
	s.nextID++
	now := s.now().UTC()
	s.outbox = append(s.outbox, store.OutboxEntry{ID: s.nextID, RunID: l.RunID, Loop: l.N, Revision: l.Revision, Created: now, Updated: now, State: store.StatePending})
	return nil
}

// AddRevision stores a revision with its loops at once (see
// store.Store.AddRevision).
func (s *Store) AddRevision(_ context.Context, v record.Revision, loops []record.Loop) error {
	fail := func(err error) error { return fmt.Errorf("memstore: revision %d of run %s: %w", v.N, v.RunID, err) }
	s.mu.Lock()
	defer s.mu.Unlock()
	r, ok := s.runs[v.RunID]
	if !ok {
		return fail(record.ErrNotFound)
	}
	if err := store.CheckRevision(r, v, loops); err != nil {
		return fail(err)
	}
	seen := map[int]bool{}
	for _, l := range loops {
		if _, ok := s.loops[loopKey{v.RunID, 1, l.N}]; !ok {
			return fail(fmt.Errorf("loop %d: not a loop of the run: %w", l.N, record.ErrNotFound))
		}
		if seen[l.N] {
			return fail(fmt.Errorf("loop %d: %w", l.N, store.ErrExists))
		}
		seen[l.N] = true
	}
	if r.Revision == 1 {
		s.revs[r.ID] = []record.Revision{record.FirstRevision(r)}
	}
	s.revs[r.ID] = append(s.revs[r.ID], v)
	for _, l := range loops {
		l.Revision = v.N
		if err := s.addLoop(l); err != nil {
			return fail(err) // not reached: checked above
		}
	}
	r.Revision = v.N
	s.runs[r.ID] = r
	return nil
}

// revision resolves rev (0: the latest) of a run; the caller holds a lock.
func (s *Store) revision(runID string, rev int) (int, error) {
	r, ok := s.runs[runID]
	if !ok {
		return 0, record.ErrNotFound
	}
	if rev == 0 {
		return r.Revision, nil
	}
	if rev < 1 || rev > r.Revision {
		return 0, fmt.Errorf("revision %d (the run has %d): %w", rev, r.Revision, record.ErrNotFound)
	}
	return rev, nil
}

// Revisions returns a run's revisions, oldest first.
func (s *Store) Revisions(_ context.Context, runID string) ([]record.Revision, error) {
	s.mu.RLock()
	defer s.mu.RUnlock()
	r, ok := s.runs[runID]
	if !ok {
		return nil, fmt.Errorf("memstore: revisions of run %s: %w", runID, record.ErrNotFound)
	}
	if r.Revision <= 1 {
		return []record.Revision{record.FirstRevision(r)}, nil
	}
	return slices.Clone(s.revs[runID]), nil
}

func startKey(r record.Run) time.Time {
	if !r.Started.IsZero() {
		return r.Started
	}
	return r.Queued
}

// Runs returns matching runs newest first (see store.Store.Runs).
func (s *Store) Runs(_ context.Context, f record.RunFilter) ([]record.Run, error) {
	s.mu.RLock()
	defer s.mu.RUnlock()
	var out []record.Run
	for _, r := range s.runs {
		switch {
		case f.Fixture != "" && r.Fixture != f.Fixture,
			f.Specimen != "" && r.Specimen != f.Specimen,
			f.Material != "" && r.Material != f.Material,
			f.State != "" && r.State != f.State,
			!f.Since.IsZero() && (r.Started.IsZero() || r.Started.Before(f.Since)),
			!f.Until.IsZero() && (r.Started.IsZero() || !r.Started.Before(f.Until)):
			continue
		}
		out = append(out, r)
	}
	sort.Slice(out, func(i, j int) bool {
		a, b := startKey(out[i]), startKey(out[j])
		if !a.Equal(b) {
			return a.After(b)
		}
		return out[i].ID > out[j].ID
	})
	lim := f.Limit
	if lim <= 0 {
		lim = store.DefaultRunLimit
	}
	if len(out) > lim {
		out = out[:lim]
	}
	return out, nil
}

// Run returns one run, or an error wrapping record.ErrNotFound.
func (s *Store) Run(_ context.Context, id string) (record.Run, error) {
	s.mu.RLock()
	defer s.mu.RUnlock()
	r, ok := s.runs[id]
	if !ok {
		return record.Run{}, fmt.Errorf("memstore: run %s: %w", id, record.ErrNotFound)
	}
	return r, nil
}

// Loops returns the latest revision's loops without samples, in order.
func (s *Store) Loops(ctx context.Context, runID string) ([]record.Loop, error) {
	return s.LoopsOf(ctx, runID, 0)
}

// LoopsOf returns one revision's loops (0: the latest) without samples.
func (s *Store) LoopsOf(_ context.Context, runID string, rev int) ([]record.Loop, error) {
	s.mu.RLock()
	defer s.mu.RUnlock()
	rev, err := s.revision(runID, rev)
	if err != nil {
		return nil, fmt.Errorf("memstore: loops of run %s: %w", runID, err)
	}
	var out []record.Loop
	for k, l := range s.loops {
		if k.run == runID && k.rev == rev {
			out = append(out, copyLoop(l, false))
		}
	}
	sort.Slice(out, func(i, j int) bool { return out[i].N < out[j].N })
	return out, nil
}

// Loop returns one loop of the latest revision with its samples.
func (s *Store) Loop(ctx context.Context, runID string, n int) (record.Loop, error) {
	return s.LoopOf(ctx, runID, n, 0)
}

// LoopOf returns one loop of a revision (0: the latest) with its samples;
// the raw samples are revision 1's.
func (s *Store) LoopOf(_ context.Context, runID string, n, rev int) (record.Loop, error) {
	s.mu.RLock()
	defer s.mu.RUnlock()
	rev, err := s.revision(runID, rev)
	if err != nil {
		return record.Loop{}, fmt.Errorf("memstore: loop %d of run %s: %w", n, runID, err)
	}
	l, ok := s.loops[loopKey{runID, rev, n}]
	if !ok {
		return record.Loop{}, fmt.Errorf("memstore: loop %d of run %s: %w", n, runID, record.ErrNotFound)
	}
	l.Raw = s.loops[loopKey{runID, 1, n}].Raw
	return copyLoop(l, true), nil
}

// Events returns a run's events in insertion order.
func (s *Store) Events(_ context.Context, runID string) ([]record.Event, error) {
	s.mu.RLock()
	defer s.mu.RUnlock()
	if _, ok := s.runs[runID]; !ok {
		return nil, fmt.Errorf("memstore: events of run %s: %w", runID, record.ErrNotFound)
	}
	return slices.Clone(s.events[runID]), nil
}

// Trend returns a figure of a specimen across runs, oldest first.
func (s *Store) Trend(_ context.Context, specimen, figure string, since time.Time) ([]record.TrendPoint, error) {
	s.mu.RLock()
	defer s.mu.RUnlock()
	type tp struct {
		p   record.TrendPoint
		seq int
	}
	var all []tp
	for k, l := range s.loops {
		r := s.runs[k.run]
		if r.Specimen != specimen || k.rev != r.Revision {
			continue
		}
		at := l.Started
		if at.IsZero() {
			at = r.Started
		}
		if !since.IsZero() && (at.IsZero() || at.Before(since)) {
			continue
		}
		for i, f := range l.Figures {
			if f.Name == figure {
				all = append(all, tp{record.TrendPoint{RunID: k.run, Loop: k.n, At: at, Value: f.Value, U: f.U}, i})
			}
		}
	}
	sort.Slice(all, func(i, j int) bool {
		a, b := all[i], all[j]
		switch {
		case !a.p.At.Equal(b.p.At):
			return a.p.At.Before(b.p.At)
		case a.p.RunID != b.p.RunID:
			return a.p.RunID < b.p.RunID
		case a.p.Loop != b.p.Loop:
			return a.p.Loop < b.p.Loop
		}
		return a.seq < b.seq
	})
	out := make([]record.TrendPoint, len(all))
	for i := range all {
		out[i] = all[i].p
	}
	return out, nil
}

// Pending returns up to limit pending entries, oldest first (≤ 0: 1000).
func (s *Store) Pending(_ context.Context, limit int) ([]store.OutboxEntry, error) {
	return s.entries(store.StatePending, limit), nil
}

// Quarantined returns up to limit quarantined entries, oldest first.
func (s *Store) Quarantined(_ context.Context, limit int) ([]store.OutboxEntry, error) {
	return s.entries(store.StateQuarantined, limit), nil
}

func (s *Store) entries(state string, limit int) []store.OutboxEntry {
	if limit <= 0 {
		limit = 1000
	}
	s.mu.RLock()
	defer s.mu.RUnlock()
	var out []store.OutboxEntry
	for _, e := range s.outbox {
		if e.State == state && len(out) < limit {
			out = append(out, e)
		}
	}
	return out
}

// update changes one pending entry.
func (s *Store) update(id int64, what string, fn func(e *store.OutboxEntry)) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	for i := range s.outbox {
		if e := &s.outbox[i]; e.ID == id && e.State == store.StatePending {
			fn(e)
			e.Updated = s.now().UTC()
			return nil
		}
	}
	return fmt.Errorf("memstore: outbox entry %d: %s: no pending entry: %w", id, what, record.ErrNotFound)
}

// Progress records acknowledged points; done never decreases.
func (s *Store) Progress(_ context.Context, id int64, done int) error {
	if done < 0 {
		return fmt.Errorf("memstore: outbox entry %d: progress %d < 0", id, done)
	}
	return s.update(id, "progress", func(e *store.OutboxEntry) { e.Done = max(e.Done, done) })
}

// Delivered marks an entry delivered.
func (s *Store) Delivered(_ context.Context, id int64) error {
	return s.update(id, "delivered", func(e *store.OutboxEntry) { e.State, e.LastError = store.StateDelivered, "" })
}

// Retry counts a failed attempt.
func (s *Store) Retry(_ context.Context, id int64, msg string) error {
	return s.update(id, "retry", func(e *store.OutboxEntry) { e.Attempts++; e.LastError = msg })
}

// Quarantine takes an entry out of the queue with the server's message.
func (s *Store) Quarantine(_ context.Context, id int64, msg string) error {
	return s.update(id, "quarantine", func(e *store.OutboxEntry) {
		e.State, e.LastError = store.StateQuarantined, msg
		e.Attempts++
	})
}

// Backlog summarizes the outbox.
func (s *Store) Backlog(_ context.Context) (store.Backlog, error) {
	s.mu.RLock()
	defer s.mu.RUnlock()
	var b store.Backlog
	for _, e := range s.outbox {
		switch e.State {
		case store.StatePending:
			if b.Pending == 0 || e.Created.Before(b.Oldest) {
				b.Oldest = e.Created
			}
			b.Pending++
		case store.StateQuarantined:
			b.Quarantined++
		}
	}
	return b, nil
}
