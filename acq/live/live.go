// Package live carries what is happening now — run state changes, step
// progress and live samples — from the engine to any number of watchers (the
// HTTP event stream, a terminal). It keeps nothing: a watcher that subscribes
// late sees only later events, and the record of truth is the store.
package live

import (
	"sync"
	"sync/atomic"
	"time"

	"hystd/acq/record"
)

// Event kinds.
const (
	KindState    = "state"    // a run changed state (queued, running, ended)
	KindProgress = "progress" // a step started or advanced
	KindSample   = "sample"   // one live sample during a recorded sweep
)

// Event is one thing that happened on a run. Fields not used by a kind are
// zero. Sample values are the engine's live estimates (H from the current or
// the probe, B from the integrator before drift and closure corrections);
// the corrected loop is in the store once the loop is committed.
type Event struct {
	Kind  string    `json:"kind"`
	RunID string    `json:"run_id"`
	At    time.Time `json:"at"`

	// state
	State  record.State `json:"state,omitempty"`
	Reason string       `json:"reason,omitempty"`

	// progress: step Step of Steps (1-based), Fraction of the whole run in [0, 1].
	Step     int     `json:"step,omitempty"`
	Steps    int     `json:"steps,omitempty"`
	StepName string  `json:"step_name,omitempty"`
	Fraction float64 `json:"fraction"`

	// sample
	Loop int     `json:"loop,omitempty"` // 1-based loop index being recorded; 0 outside a loop
	T    float64 `json:"t_s"`            // s since the run started
	H    float64 `json:"h_a_m"`
	B    float64 `json:"b_t"`
	I    float64 `json:"i_a"`
}

// Source is what a watcher needs: Subscribe returns a channel of events and
// a cancel function that ends the subscription and closes the channel.
// Calling cancel more than once is allowed.
type Source interface {
	Subscribe() (<-chan Event, func())
}

// Hub is a broadcaster. Publish never blocks: a subscriber whose buffer is
// full misses the event (counted in Dropped), so a slow watcher can never
// stall the engine. All methods are safe for concurrent use; the zero Hub is
// not usable, use NewHub.
type Hub struct {
	mu      sync.Mutex
	subs    map[*sub]struct{}
	buf     int
	dropped atomic.Uint64
}

type sub struct {
	ch     chan Event
	closed bool
}

var _ Source = (*Hub)(nil)

// NewHub returns a hub whose subscribers each buffer up to buf events
// (buf < 1 means 256).
func NewHub(buf int) *Hub {
	if buf < 1 {
		buf = 256
	}
	return &Hub{subs: map[*sub]struct{}{}, buf: buf}
}

// Publish hands ev to every subscriber that has room for it.
func (h *Hub) Publish(ev Event) {
	h.mu.Lock()
	defer h.mu.Unlock()
	for s := range h.subs {
		select {
		case s.ch <- ev:
		default:
			h.dropped.Add(1)
		}
	}
}

// Subscribe registers a watcher. The channel is closed by the returned
// cancel function, never by the hub otherwise.
func (h *Hub) Subscribe() (<-chan Event, func()) {
	s := &sub{ch: make(chan Event, h.buf)}
	h.mu.Lock()
	h.subs[s] = struct{}{}
	h.mu.Unlock()
	return s.ch, func() {
		h.mu.Lock()
		defer h.mu.Unlock()
		if !s.closed {
			s.closed = true
			delete(h.subs, s)
			close(s.ch)
		}
	}
}

// Subscribers returns the number of current subscriptions.
func (h *Hub) Subscribers() int {
	h.mu.Lock()
	defer h.mu.Unlock()
	return len(h.subs)
}

// Dropped returns how many deliveries were skipped because a subscriber's
// buffer was full, since the hub was made.
func (h *Hub) Dropped() uint64 { return h.dropped.Load() }
