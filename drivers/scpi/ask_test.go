package scpi

import (
	"context"
	"errors"
	"testing"
	"time"

	"hystd/drivers/link"
)

// held is a Poller whose replies are released by the test: nothing is in
// until release, as a reply still on the line.
type held struct {
	wrote []string
	ready []byte
	now   time.Time // the client's clock, moved by the test
}

func (s *held) Write(ctx context.Context, p []byte) (int, error) {
	s.wrote = append(s.wrote, string(p))
	return len(p), nil
}
func (s *held) Read(ctx context.Context, p []byte) (int, error) {
	return s.ReadWithin(ctx, p, 0)
}
func (s *held) ReadWithin(ctx context.Context, p []byte, wait time.Duration) (int, error) {
	n := copy(p, s.ready)
	s.ready = s.ready[n:]
	return n, nil
}

// Ask sends at once and QueryTimed collects without asking again; Await
// says false until the terminator is in and stamps the reply then: Sent
// at Ask, Received when Await saw the terminator (not when QueryTimed
// was called).
func TestAskAwaitCollect(t *testing.T) {
	s := &held{now: time.Unix(100, 0)}
	c := New(s, Options{Timeout: time.Minute, Now: func() time.Time { return s.now }})
	ctx := context.Background()
	if err := c.Ask(ctx, "MEAS:CURR?"); err != nil {
		t.Fatal(err)
	}
	if len(s.wrote) != 1 || s.wrote[0] != "MEAS:CURR?\n" {
		t.Fatalf("wrote %q", s.wrote)
	}
	s.now = s.now.Add(3 * time.Millisecond)
	if c.Await(ctx, 0) {
		t.Fatal("ready with nothing on the line")
	}
	s.ready = []byte("+1.5")
	if c.Await(ctx, 0) {
		t.Fatal("ready without the terminator")
	}
	s.ready = []byte("0E+00\n")
	if !c.Await(ctx, 0) {
		t.Fatal("not ready with the reply in")
	}
	s.now = s.now.Add(time.Second) // the caller comes back later
	r, err := c.QueryTimed(ctx, "MEAS:CURR?")
	if err != nil || r.Text != "+1.50E+00" {
		t.Fatalf("reply %+v, %v", r, err)
	}
	if len(s.wrote) != 1 {
		t.Fatalf("asked again: %q", s.wrote)
	}
	if !r.Sent.Equal(time.Unix(100, 0)) || r.Received.Sub(r.Sent) != 3*time.Millisecond {
		t.Fatalf("stamps %v → %v, want 3 ms after the send", r.Sent, r.Received)
	}
}

// A reply not in by the Timeout (counted from Ask) is a timeout that
// Await reports as settled and QueryTimed returns; the line is then stale,
// so the next exchange resynchronises before asking.
func TestAskedReplyLate(t *testing.T) {
	s := &held{}
	c := New(s, Options{Timeout: time.Millisecond})
	ctx := context.Background()
	if err := c.Ask(ctx, "FETC:FLUX?"); err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(10 * time.Second)
	for !c.Await(ctx, time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatal("Await never settled a reply past its Timeout")
		}
	}
	if _, err := c.QueryTimed(ctx, "FETC:FLUX?"); !errors.Is(err, link.ErrTimeout) {
		t.Fatalf("got %v, want link.ErrTimeout", err)
	}
	if !c.Stale() {
		t.Fatal("the line is not marked stale after a late reply")
	}
}

// On a Stream that cannot look without blocking, Await waits for the
// reply; an exchange other than the asked query abandons it and
// resynchronises first (its late reply is drained, not taken for the new
// query's answer).
func TestAskOnPlainStreamAndAbandon(t *testing.T) {
	ctx := context.Background()
	c := client(t,
		ex{Send: "MEAS:VOLT?", Reply: "+2.0E+00"},
		ex{Send: "FETC:FLUX?", Reply: "-1.0E-04"},
		ex{Send: "MEAS:CURR?", Reply: "+3.0E+00"},
	)
	if err := c.Ask(ctx, "MEAS:VOLT?"); err != nil {
		t.Fatal(err)
	}
	if !c.Await(ctx, 0) {
		t.Fatal("Await on a plain stream did not wait for the reply")
	}
	if v, err := c.Query(ctx, "MEAS:VOLT?"); err != nil || v != "+2.0E+00" {
		t.Fatalf("got %q, %v", v, err)
	}
	if err := c.Ask(ctx, "FETC:FLUX?"); err != nil {
		t.Fatal(err)
	}
	// Not collected: the next query drains the line first.
	if v, err := c.Query(ctx, "MEAS:CURR?"); err != nil || v != "+3.0E+00" {
		t.Fatalf("got %q, %v after an abandoned query", v, err)
	}
}

// A reply whose bytes are only read after the Timeout is late, as in
// QueryTimed, even though it waits complete in the port's buffer: never
// taken for an answer.
func TestAskedReplyReadAfterTimeoutIsLate(t *testing.T) {
	s := &held{}
	c := New(s, Options{Timeout: time.Millisecond})
	ctx := context.Background()
	if err := c.Ask(ctx, "FETC:FLUX?"); err != nil {
		t.Fatal(err)
	}
	time.Sleep(5 * time.Millisecond)
	s.ready = []byte("-9.99E-04\n")
	if !c.Await(ctx, 0) {
		t.Fatal("a query past its Timeout is not settled")
	}
	if r, err := c.QueryTimed(ctx, "FETC:FLUX?"); !errors.Is(err, link.ErrTimeout) {
		t.Fatalf("got %+v, %v; want link.ErrTimeout", r, err)
	}
}

// AskBehind queues a query behind an uncollected one when Options.Queued
// allows: both go out, the replies are collected in the order of their
// queries, each stamped from its own send to when its own terminator was
// seen. With Queued 1 it is Ask (the first query is abandoned).
func TestAskBehindCollectsInOrder(t *testing.T) {
	s := &held{now: time.Unix(100, 0)}
	c := New(s, Options{Timeout: time.Minute, Queued: 2, Now: func() time.Time { return s.now }})
	ctx := context.Background()
	if err := c.Ask(ctx, "MEAS:CURR?"); err != nil {
		t.Fatal(err)
	}
	s.now = s.now.Add(time.Millisecond)
	if err := c.AskBehind(ctx, "MEAS:VOLT?"); err != nil {
		t.Fatal(err)
	}
	if len(s.wrote) != 2 || s.wrote[1] != "MEAS:VOLT?\n" || c.Stale() {
		t.Fatalf("wrote %q, stale %v", s.wrote, c.Stale())
	}
	s.now = s.now.Add(2 * time.Millisecond)
	s.ready = []byte("+2.0E+00\n+1.6E+00\n")
	if !c.Await(ctx, 0) {
		t.Fatal("first reply not ready")
	}
	i, err := c.QueryTimed(ctx, "MEAS:CURR?")
	if err != nil || i.Text != "+2.0E+00" || i.Received.Sub(i.Sent) != 3*time.Millisecond {
		t.Fatalf("current %+v, %v", i, err)
	}
	s.now = s.now.Add(time.Millisecond)
	if !c.Await(ctx, 0) {
		t.Fatal("second reply not ready")
	}
	v, err := c.QueryTimed(ctx, "MEAS:VOLT?")
	if err != nil || v.Text != "+1.6E+00" || v.Sent.Sub(i.Sent) != time.Millisecond || v.Received.Sub(v.Sent) != 3*time.Millisecond {
		t.Fatalf("voltage %+v, %v", v, err)
	}
	if len(s.wrote) != 2 || c.Stale() {
		t.Fatalf("asked again: %q (stale %v)", s.wrote, c.Stale())
	}

	one := New(&silent{}, Options{Timeout: time.Minute, Quiet: time.Millisecond})
	if err := one.Ask(ctx, "MEAS:CURR?"); err != nil {
		t.Fatal(err)
	}
	if err := one.AskBehind(ctx, "MEAS:VOLT?"); err != nil {
		t.Fatal(err)
	}
	if one.Breaks() != 1 || len(one.asked) != 1 || one.asked[0].cmd != "MEAS:VOLT?" {
		t.Fatal("with Queued 1, AskBehind did not abandon the first query")
	}
}

// silent is a stream on which nothing arrives: a read times out.
type silent struct{ held }

func (s *silent) Read(ctx context.Context, p []byte) (int, error) {
	return 0, &link.Error{Op: "read", Kind: link.ErrTimeout}
}

// A queued reply that is late abandons the queries behind it: collecting
// the first gives the timeout, the line is stale and no query is left
// asked, so the second is asked again after the resync rather than
// collected from whatever arrives next (a reply shifted up by a lost one
// would otherwise answer it).
func TestAskBehindLateFirstAbandonsRest(t *testing.T) {
	s := &held{}
	c := New(s, Options{Timeout: time.Millisecond, Queued: 2})
	ctx := context.Background()
	if err := c.Ask(ctx, "MEAS:CURR?"); err != nil {
		t.Fatal(err)
	}
	if err := c.AskBehind(ctx, "MEAS:VOLT?"); err != nil {
		t.Fatal(err)
	}
	time.Sleep(2 * time.Millisecond) // past the Timeout: this test's subject, not a speed bound
	if !c.Await(ctx, 0) {
		t.Fatal("a late reply is settled")
	}
	if _, err := c.QueryTimed(ctx, "MEAS:CURR?"); !errors.Is(err, link.ErrTimeout) {
		t.Fatalf("got %v, want a timeout", err)
	}
	if !c.Stale() || len(c.asked) != 0 {
		t.Fatalf("stale %v, %d queries still asked", c.Stale(), len(c.asked))
	}
}
