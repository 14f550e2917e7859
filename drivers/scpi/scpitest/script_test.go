package scpitest

import (
	"context"
	"fmt"
	"strings"
	"testing"
)

// recorder is a testing.TB that records failures instead of failing.
type recorder struct {
	testing.TB
	errs     []string
	cleanups []func()
}

func (r *recorder) Errorf(format string, args ...any) {
	r.errs = append(r.errs, fmt.Sprintf(format, args...))
}
func (r *recorder) Cleanup(f func()) { r.cleanups = append(r.cleanups, f) }
func (r *recorder) finish() {
	for _, f := range r.cleanups {
		f()
	}
}

func TestLeftoverExchangesFail(t *testing.T) {
	r := &recorder{TB: t}
	s := New(r, "\n", "\n", Exchange{Send: "A?", Reply: "1"}, Exchange{Send: "B?", Reply: "2"})
	s.Write(context.Background(), []byte("A?\n"))
	r.finish()
	if len(r.errs) != 1 || !strings.Contains(r.errs[0], `1 exchange(s) left over, next "B?"`) {
		t.Fatalf("errors %q", r.errs)
	}
}

func TestWrongCommandFails(t *testing.T) {
	r := &recorder{TB: t}
	s := New(r, "\n", "\n", Exchange{Send: "A?", Reply: "1"})
	if _, err := s.Write(context.Background(), []byte("B?\n")); err == nil {
		t.Fatal("an unexpected command was accepted")
	}
	if len(r.errs) != 1 || !strings.Contains(r.errs[0], `got command "B?", want "A?"`) {
		t.Fatalf("errors %q", r.errs)
	}
}

func TestUnexpectedReconnectFails(t *testing.T) {
	r := &recorder{TB: t}
	s := New(r, "\n", "\n")
	if err := s.Reconnect(context.Background()); err == nil {
		t.Fatal("an unscripted reconnect was accepted")
	}
	r.finish()
	if len(r.errs) != 1 {
		t.Fatalf("errors %q", r.errs)
	}
}

func TestCompleteScriptPasses(t *testing.T) {
	r := &recorder{TB: t}
	s := New(r, "\r\n", "\r", Exchange{Send: "A?", Reply: "1"}, Reconnect())
	ctx := context.Background()
	s.Write(ctx, []byte("A"))
	s.Write(ctx, []byte("?\r\n")) // a command split over two writes
	buf := make([]byte, 8)
	n, err := s.Read(ctx, buf)
	if err != nil || string(buf[:n]) != "1\r" {
		t.Fatalf("read %q, %v", buf[:n], err)
	}
	if err := s.Reconnect(ctx); err != nil {
		t.Fatal(err)
	}
	r.finish()
	if len(r.errs) != 0 {
		t.Fatalf("errors %q", r.errs)
	}
}
