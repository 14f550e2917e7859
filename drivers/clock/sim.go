package clock

import (
	"container/heap"
	"context"
	"runtime"
	"sync"
	"time"
)

// Sim is simulated time for a bench and the program driving it.
//
// The rule is that of a discrete-event simulation: time stands still while
// anybody works, and moves straight to the earliest wake-up once nobody can
// act at the present instant any more. "Nobody can act" means:
//   - every actor sleeps in SleepUntil (an actor is whoever drives the bench:
//     by default exactly one, the engine's goroutine together with the
//     drivers it calls; Join adds more);
//   - every registered quiet check passes (the bench's: no command line
//     unread on any pseudo-terminal, none being executed);
//   - no passive waiter that was woken is still acting (see Passive).
//
// Then the clock jumps to the earliest pending wake-up (actor or passive,
// in the order they were registered for equal times) and wakes it; a woken
// passive waiter holds the clock until it calls its done, and the next jump
// waits for quiet again. So every command the engine sends between two of
// its sleeps is answered at one simulated instant, from the physics at that
// instant, whatever the machine's load: bytes travel through the real ptys,
// only time is simulated.
//
// Reads in flight need no special care: a reader is never asleep on the
// clock, so the instant cannot move under it. The price is that a client's
// serial read timeouts stay in real time (see the package's users: they
// are made generous in simulated time), and a reply the bench delays in
// simulated time would reach the client only after the client's next
// sleep. The bench therefore models a short delay as a late reply: held
// until the client, having timed out, writes its next command line, then
// sent before that line's reply (drivers/sim, TestLateReplyInSimulatedTime).
type Sim struct {
	mu       sync.Mutex
	now      time.Time
	actors   int
	sleeping int
	busy     int // woken passive waiters that have not called done
	seq      uint64
	wait     waitHeap
	quiet    map[int]func() bool
	nextQ    int
	running  bool // an advancer goroutine is at work
}

var _ Clock = (*Sim)(nil)

// NewSim returns simulated time standing at start, with one actor.
func NewSim(start time.Time) *Sim {
	return &Sim{now: start, actors: 1, quiet: map[int]func() bool{}}
}

func (*Sim) simulated() {}

// Now returns the simulated present.
func (s *Sim) Now() time.Time {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.now
}

// Join adds an actor (a goroutine that drives the bench on its own and
// sleeps on the clock); call leave when it stops. With more actors than
// goroutines that sleep, time never moves.
func (s *Sim) Join() (leave func()) {
	s.mu.Lock()
	s.actors++
	s.mu.Unlock()
	var once sync.Once
	return func() {
		once.Do(func() {
			s.mu.Lock()
			s.actors--
			s.kickLocked()
			s.mu.Unlock()
		})
	}
}

// AddQuiet registers a check that must report true before time may move
// (e.g. "no command unread on my lines"). It is called without the clock's
// lock, from another goroutine, possibly many times. remove unregisters it.
func (s *Sim) AddQuiet(f func() bool) (remove func()) {
	s.mu.Lock()
	id := s.nextQ
	s.nextQ++
	s.quiet[id] = f
	s.mu.Unlock()
	return func() {
		s.mu.Lock()
		delete(s.quiet, id)
		s.kickLocked()
		s.mu.Unlock()
	}
}

// SleepUntil is an actor's sleep: it returns once the simulated time has
// reached t (nil), or when ctx ends (ctx's error; time is not moved).
func (s *Sim) SleepUntil(ctx context.Context, t time.Time) error {
	w, err := s.register(ctx, t, true)
	if w == nil {
		return err
	}
	select {
	case <-w.ch:
		return nil
	case <-ctx.Done():
		if s.cancel(w) {
			return ctx.Err()
		}
		return nil
	}
}

// passive waits until t without being an actor; see Passive.
func (s *Sim) passive(ctx context.Context, t time.Time) (func(), error) {
	w, err := s.register(ctx, t, false)
	if w == nil {
		return func() {}, err
	}
	select {
	case <-w.ch:
	case <-ctx.Done():
		if s.cancel(w) {
			return func() {}, ctx.Err()
		}
	}
	var once sync.Once
	return func() {
		once.Do(func() {
			s.mu.Lock()
			s.busy--
			s.kickLocked()
			s.mu.Unlock()
		})
	}, nil
}

func (s *Sim) register(ctx context.Context, t time.Time, actor bool) (*waiter, error) {
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if !t.After(s.now) {
		if !actor {
			s.busy++ // due already: it acts now, like a woken waiter
			return &waiter{ch: closedCh}, nil
		}
		return nil, nil
	}
	w := &waiter{at: t, seq: s.seq, actor: actor, ch: make(chan struct{})}
	s.seq++
	heap.Push(&s.wait, w)
	if actor {
		s.sleeping++
	}
	s.kickLocked()
	return w, nil
}

var closedCh = func() chan struct{} { c := make(chan struct{}); close(c); return c }()

// cancel removes a waiter whose context ended; false if it was woken first
// (it then counts as woken).
func (s *Sim) cancel(w *waiter) bool {
	s.mu.Lock()
	defer s.mu.Unlock()
	if w.fired {
		return false
	}
	heap.Remove(&s.wait, w.index)
	if w.actor {
		s.sleeping--
	}
	return true
}

// canMoveLocked: every actor asleep, nothing woken still acting, something to wake.
func (s *Sim) canMoveLocked() bool {
	return s.sleeping >= s.actors && s.busy == 0 && len(s.wait) > 0
}

// kickLocked starts an advancer when time may be able to move.
func (s *Sim) kickLocked() {
	if s.running || !s.canMoveLocked() {
		return
	}
	s.running = true
	go s.advance()
}

// advance moves time from wake-up to wake-up while nobody can act.
func (s *Sim) advance() {
	for {
		s.mu.Lock()
		if !s.canMoveLocked() {
			s.running = false
			s.mu.Unlock()
			return
		}
		checks := make([]func() bool, 0, len(s.quiet))
		for _, f := range s.quiet {
			checks = append(checks, f)
		}
		s.mu.Unlock()
		if !allQuiet(checks) {
			continue
		}
		s.mu.Lock()
		if !s.canMoveLocked() {
			s.running = false
			s.mu.Unlock()
			return
		}
		w := heap.Pop(&s.wait).(*waiter)
		if w.at.After(s.now) {
			s.now = w.at
		}
		w.fired = true
		if w.actor {
			s.sleeping--
		} else {
			s.busy++
		}
		close(w.ch)
		s.mu.Unlock()
	}
}

// allQuiet polls the checks until they all pass once in a row, or gives
// up after a short while so that the caller re-checks its own state (an
// actor may have woken by its context meanwhile).
func allQuiet(checks []func() bool) bool {
	pause := 10 * time.Microsecond
	for i := 0; i < 200; i++ {
		ok := true
		for _, f := range checks {
			if !f() {
				ok = false
				break
			}
		}
		if ok {
			return true
		}
		if i < 20 {
			runtime.Gosched()
		} else {
			time.Sleep(pause)
			pause = min(2*pause, time.Millisecond)
		}
	}
	return false
}

type waiter struct {
	at    time.Time
	seq   uint64
	actor bool
	fired bool
	index int
	ch    chan struct{}
}

type waitHeap []*waiter

func (h waitHeap) Len() int { return len(h) }
func (h waitHeap) Less(i, j int) bool {
	if !h[i].at.Equal(h[j].at) {
		return h[i].at.Before(h[j].at)
	}
	return h[i].seq < h[j].seq
}
func (h waitHeap) Swap(i, j int) {
	h[i], h[j] = h[j], h[i]
	h[i].index, h[j].index = i, j
}
func (h *waitHeap) Push(x any) {
	w := x.(*waiter)
	w.index = len(*h)
	*h = append(*h, w)
}
func (h *waitHeap) Pop() any {
	old := *h
	w := old[len(old)-1]
	old[len(old)-1] = nil
	*h = old[:len(old)-1]
	return w
}
