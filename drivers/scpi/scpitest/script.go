// Package scpitest is a scripted-conversation fake of an instrument's byte
// stream: each Exchange names the command the client must send next and
// what the instrument answers. A command out of order, a read with nothing
// to answer and exchanges left over at the end of the test fail the test.
package scpitest

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"testing"

	"hystd/drivers/link"
)

// Exchange is one step of a conversation.
type Exchange struct {
	// Send is the command expected next, without the write terminator.
	Send string
	// Reply is answered after Send, followed by the read terminator. An
	// empty Reply answers nothing (a setting).
	Reply string
	// Raw, when not nil, is answered verbatim instead of Reply (blocks,
	// garbled bytes, missing terminators).
	Raw []byte
	// Err, when not nil, is returned by the first Read after Send, before
	// any reply is delivered (so Reply, when also given, arrives late).
	Err error
	// Reconnect marks a step where the client must call Reconnect instead
	// of sending a command.
	Reconnect bool
}

// Timeout is a read timeout as drivers/link reports it.
var Timeout = &link.Error{Op: "read", Port: "scripted", Kind: link.ErrTimeout}

// Hangup is a disconnect as drivers/link reports it.
var Hangup = &link.Error{Op: "read", Port: "scripted", Kind: link.ErrDisconnected}

// Reconnect is the step expecting a reconnect.
func Reconnect() Exchange { return Exchange{Reconnect: true} }

// Script is the fake stream. It implements scpi.Stream and, with
// Reconnect and Close, the port interface of drivers/profile. Safe for use
// by one client goroutine and the test goroutine.
type Script struct {
	t         testing.TB
	writeTerm string
	readTerm  string

	mu      sync.Mutex
	steps   []Exchange
	next    int
	partial strings.Builder
	out     []byte
	pendErr error
	broken  bool
	closed  bool
}

// New returns a Script expecting the exchanges in order. writeTerm ends the
// client's commands, readTerm is appended to replies. At the end of the test
// every exchange must have been used.
func New(t testing.TB, writeTerm, readTerm string, steps ...Exchange) *Script {
	s := &Script{t: t, writeTerm: writeTerm, readTerm: readTerm, steps: steps}
	t.Cleanup(func() {
		s.mu.Lock()
		defer s.mu.Unlock()
		if s.next < len(s.steps) {
			t.Errorf("scpitest: %d exchange(s) left over, next %s", len(s.steps)-s.next, describe(s.steps[s.next]))
		}
	})
	return s
}

func describe(e Exchange) string {
	if e.Reconnect {
		return "a reconnect"
	}
	return fmt.Sprintf("%q", e.Send)
}

// Write takes the client's bytes; each complete command is checked against
// the next exchange.
func (s *Script) Write(ctx context.Context, p []byte) (int, error) {
	if err := ctx.Err(); err != nil {
		return 0, err
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.closed {
		return 0, &link.Error{Op: "write", Port: "scripted", Kind: link.ErrClosed}
	}
	if s.broken {
		return 0, &link.Error{Op: "write", Port: "scripted", Kind: link.ErrDisconnected}
	}
	s.partial.Write(p)
	for {
		text := s.partial.String()
		i := strings.Index(text, s.writeTerm)
		if i < 0 {
			return len(p), nil
		}
		cmd := text[:i]
		s.partial.Reset()
		s.partial.WriteString(text[i+len(s.writeTerm):])
		if err := s.take(cmd); err != nil {
			return len(p), err
		}
	}
}

func (s *Script) take(cmd string) error {
	if s.next >= len(s.steps) {
		s.t.Errorf("scpitest: unexpected command %q after the end of the script", cmd)
		return errors.New("scpitest: script ended")
	}
	e := s.steps[s.next]
	if e.Reconnect || e.Send != cmd {
		s.t.Errorf("scpitest: step %d: got command %q, want %s", s.next+1, cmd, describe(e))
		return errors.New("scpitest: unexpected command")
	}
	s.next++
	s.pendErr = e.Err
	if e.Err != nil && errors.Is(e.Err, link.ErrDisconnected) {
		s.broken = true
	}
	switch {
	case e.Raw != nil:
		s.out = append(s.out, e.Raw...)
	case e.Reply != "":
		s.out = append(s.out, e.Reply+s.readTerm...)
	}
	return nil
}

// Read returns scripted reply bytes. With nothing to answer it returns a
// timeout, as a silent instrument would.
func (s *Script) Read(ctx context.Context, p []byte) (int, error) {
	if err := ctx.Err(); err != nil {
		return 0, err
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.closed {
		return 0, &link.Error{Op: "read", Port: "scripted", Kind: link.ErrClosed}
	}
	if s.pendErr != nil {
		err := s.pendErr
		s.pendErr = nil
		if s.broken {
			s.out = nil
		}
		return 0, err
	}
	if s.broken {
		return 0, Hangup
	}
	if len(s.out) == 0 {
		return 0, Timeout
	}
	n := copy(p, s.out)
	s.out = s.out[n:]
	return n, nil
}

// Reconnect must be scripted with the Reconnect step.
func (s *Script) Reconnect(ctx context.Context) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.next >= len(s.steps) || !s.steps[s.next].Reconnect {
		want := "the end of the script"
		if s.next < len(s.steps) {
			want = describe(s.steps[s.next])
		}
		s.t.Errorf("scpitest: step %d: unexpected reconnect, want %s", s.next+1, want)
		return errors.New("scpitest: unexpected reconnect")
	}
	s.next++
	s.broken, s.out, s.pendErr = false, nil, nil
	s.partial.Reset()
	return nil
}

// Close marks the stream closed.
func (s *Script) Close() error {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.closed = true
	return nil
}

// Left returns how many exchanges are still expected.
func (s *Script) Left() int {
	s.mu.Lock()
	defer s.mu.Unlock()
	return len(s.steps) - s.next
}
