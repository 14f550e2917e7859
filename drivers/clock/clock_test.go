package clock

import (
	"context"
	"net/http/httptest"
	"sync"
	"sync/atomic"
	"testing"
	"time"
)

var t0 = time.Date(2026, 3, 2, 7, 30, 0, 0, time.UTC)

// TestSimActorSleepJumps: the one actor's sleep returns at once (in real
// time) with the clock exactly at the wake-up.
func TestSimActorSleepJumps(t *testing.T) {
	s := NewSim(t0)
	for _, d := range []time.Duration{time.Hour, time.Millisecond, 25 * time.Second} {
		want := s.Now().Add(d)
		if err := s.SleepUntil(context.Background(), want); err != nil {
			t.Fatal(err)
		}
		if got := s.Now(); !got.Equal(want) {
			t.Fatalf("after sleeping until %v the clock reads %v", want, got)
		}
	}
	if err := Sleep(context.Background(), s, 0); err != nil {
		t.Fatal(err)
	}
}

// TestSimWaitsForQuiet: time does not move while a quiet check fails, and
// moves once it passes.
func TestSimWaitsForQuiet(t *testing.T) {
	s := NewSim(t0)
	var quiet atomic.Bool
	remove := s.AddQuiet(quiet.Load)
	defer remove()
	done := make(chan struct{})
	go func() {
		defer close(done)
		s.SleepUntil(context.Background(), t0.Add(time.Second))
	}()
	// State, not time: the sleeper is registered once it counts as asleep.
	for {
		s.mu.Lock()
		n := s.sleeping
		s.mu.Unlock()
		if n == 1 {
			break
		}
		time.Sleep(time.Millisecond)
	}
	if !s.Now().Equal(t0) {
		t.Fatalf("time moved while the line was busy: %v", s.Now())
	}
	quiet.Store(true)
	<-done
	if !s.Now().Equal(t0.Add(time.Second)) {
		t.Fatalf("clock %v", s.Now())
	}
}

// TestSimPassiveOrder: passive waiters are woken in time order, each one
// holding the clock until it is done, before the actor's later wake-up.
func TestSimPassiveOrder(t *testing.T) {
	s := NewSim(t0)
	leave := s.Join() // a second actor keeps time still while waiters register
	var mu sync.Mutex
	var order []time.Duration
	var wg sync.WaitGroup
	for _, d := range []time.Duration{300 * time.Millisecond, 100 * time.Millisecond, 200 * time.Millisecond} {
		wg.Add(1)
		go func() {
			defer wg.Done()
			done, err := Passive(context.Background(), s, t0.Add(d))
			if err != nil {
				t.Error(err)
				return
			}
			mu.Lock()
			order = append(order, s.Now().Sub(t0))
			mu.Unlock()
			done()
		}()
	}
	for {
		s.mu.Lock()
		n := len(s.wait)
		s.mu.Unlock()
		if n == 3 {
			break
		}
		time.Sleep(time.Millisecond)
	}
	leave()
	if err := s.SleepUntil(context.Background(), t0.Add(time.Second)); err != nil {
		t.Fatal(err)
	}
	wg.Wait()
	want := []time.Duration{100 * time.Millisecond, 200 * time.Millisecond, 300 * time.Millisecond}
	if len(order) != 3 || order[0] != want[0] || order[1] != want[1] || order[2] != want[2] {
		t.Fatalf("passive waiters woke at %v, want %v", order, want)
	}
	if !s.Now().Equal(t0.Add(time.Second)) {
		t.Fatalf("clock %v", s.Now())
	}
}

// TestSimTwoActors: with two actors time moves only once both sleep.
func TestSimTwoActors(t *testing.T) {
	s := NewSim(t0)
	leave := s.Join() // the second actor: the goroutine below, until it is done
	first := make(chan struct{})
	go func() {
		s.SleepUntil(context.Background(), t0.Add(time.Second))
		close(first)
		leave()
	}()
	select {
	case <-first:
		t.Fatal("time moved with one of two actors awake")
	case <-time.After(20 * time.Millisecond): // a negative check: nothing may happen
	}
	if err := s.SleepUntil(context.Background(), t0.Add(2*time.Second)); err != nil {
		t.Fatal(err)
	}
	<-first
	if !s.Now().Equal(t0.Add(2 * time.Second)) {
		t.Fatalf("clock %v", s.Now())
	}
}

// TestSimCancel: a cancelled sleep returns its context's error and leaves
// the clock where it was.
func TestSimCancel(t *testing.T) {
	s := NewSim(t0)
	leave := s.Join()
	defer leave()
	ctx, cancel := context.WithCancel(context.Background())
	go cancel()
	if err := s.SleepUntil(ctx, t0.Add(time.Hour)); err != context.Canceled {
		t.Fatalf("err %v", err)
	}
	if !s.Now().Equal(t0) || s.sleeping != 0 || len(s.wait) != 0 {
		t.Fatalf("clock %v, %d sleeping, %d waiting", s.Now(), s.sleeping, len(s.wait))
	}
}

// TestManual: SleepUntil jumps, After waits for Advance.
func TestManual(t *testing.T) {
	m := NewManual(t0)
	ch := m.After(time.Second)
	if m.Waiters() != 1 {
		t.Fatal("no waiter")
	}
	m.Advance(500 * time.Millisecond)
	select {
	case <-ch:
		t.Fatal("woke early")
	default:
	}
	m.SleepUntil(context.Background(), t0.Add(2*time.Second))
	if got := <-ch; !got.Equal(t0.Add(2 * time.Second)) {
		t.Fatalf("woke at %v", got)
	}
}

// TestRemote: another process's actor sleeps on the served clock and reads
// its present; a sleep whose request is dropped (the process killed) is
// withdrawn and time does not move for it.
func TestRemote(t *testing.T) {
	s := NewSim(t0)
	srv := httptest.NewServer(Handler(s))
	defer srv.Close()
	ctx := context.Background()
	r, err := Dial(ctx, srv.URL)
	if err != nil {
		t.Fatal(err)
	}
	if !IsSimulated(r) || !r.Now().Equal(t0) {
		t.Fatalf("remote now %v", r.Now())
	}
	if err := Sleep(ctx, r, 25*time.Second); err != nil {
		t.Fatal(err)
	}
	if want := t0.Add(25 * time.Second); !s.Now().Equal(want) || !r.Now().Equal(want) {
		t.Fatalf("served %v, remote %v, want %v", s.Now(), r.Now(), want)
	}
	leave := s.Join() // a second actor keeps time still: the sleep below stays pending
	cctx, cancel := context.WithCancel(ctx)
	errc := make(chan error, 1)
	go func() { errc <- r.SleepUntil(cctx, t0.Add(time.Hour)) }()
	for {
		s.mu.Lock()
		n := s.sleeping
		s.mu.Unlock()
		if n == 1 {
			break
		}
		time.Sleep(time.Millisecond)
	}
	cancel()
	if err := <-errc; err != context.Canceled {
		t.Fatalf("cancelled remote sleep: %v", err)
	}
	for {
		s.mu.Lock()
		n := s.sleeping
		s.mu.Unlock()
		if n == 0 {
			break
		}
		time.Sleep(time.Millisecond)
	}
	leave()
	if !s.Now().Equal(t0.Add(25 * time.Second)) {
		t.Fatalf("time moved for a withdrawn sleep: %v", s.Now())
	}
	if _, err := Dial(ctx, "ftp://x"); err == nil {
		t.Error("a non-http clock address was accepted")
	}
}
