package sim

import (
	"context"
	"errors"
	"log/slog"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"

	"hystd/drivers/clock"
	"hystd/drivers/instr"
	"hystd/drivers/link"
	"hystd/drivers/scpi"
)

// faultBench is the demo bench with the given faults section appended.
func faultBench(t *testing.T, faults string) Config {
	t.Helper()
	data, err := os.ReadFile("../../configs/bench-demo.yaml")
	if err != nil {
		t.Fatal(err)
	}
	c, err := ParseBench("bench-test.yaml", append(data, []byte("faults:\n"+faults)...))
	if err != nil {
		t.Fatal(err)
	}
	return c
}

// driver opens a role's port through the project's own transport and SCPI
// client (drivers/link, drivers/scpi), as the instrument drivers do.
func driver(t *testing.T, b *Bench, role string) (*link.Conn, *scpi.Client) {
	t.Helper()
	conn, err := link.Open(context.Background(), link.Address{Path: b.Ports()[role]},
		link.Settings{Baud: 115200, ReadTimeout: 600 * time.Millisecond},
		link.Options{Log: slog.New(slog.DiscardHandler), Backoff: link.Backoff{Initial: time.Millisecond, Max: 10 * time.Millisecond, Attempts: 50}})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	return conn, scpi.New(conn, scpi.Options{Name: role, ErrorQuery: "SYST:ERR?"})
}

// TestFaultsSeenAsTypedErrors: each injected fault reaches the drivers as
// the error type they decide on.
func TestFaultsSeenAsTypedErrors(t *testing.T) {
	ctx := context.Background()
	t.Run("drop is a timeout", func(t *testing.T) {
		b, _ := startBench(t, faultBench(t, "  - {role: thermometer, kind: drop, after_commands: 2}\n"))
		_, c := driver(t, b, instr.RoleThermometer)
		if _, err := c.QueryNumber(ctx, "MEAS:TEMP?"); err != nil {
			t.Fatalf("1st query: %v", err)
		}
		_, err := c.QueryNumber(ctx, "MEAS:TEMP?")
		if !errors.Is(err, link.ErrTimeout) {
			t.Fatalf("dropped reply: err = %v, want link.ErrTimeout", err)
		}
		if _, err := c.QueryNumber(ctx, "MEAS:TEMP?"); err != nil {
			t.Errorf("after the drop: %v", err)
		}
	})
	t.Run("garble is a parse error", func(t *testing.T) {
		b, _ := startBench(t, faultBench(t, "  - {role: field_meter, kind: garble, after_commands: 1}\n"))
		_, c := driver(t, b, instr.RoleFieldMeter)
		_, err := c.QueryNumber(ctx, "MEAS:FIEL?")
		var pe *scpi.ParseError
		if !errors.As(err, &pe) {
			t.Fatalf("garbled reply: err = %v, want *scpi.ParseError", err)
		}
		if _, err := c.QueryNumber(ctx, "MEAS:FIEL?"); err != nil {
			t.Errorf("after the garble: %v", err)
		}
	})
	t.Run("delay is a timeout, then the late reply is discarded", func(t *testing.T) {
		b, clk := startBench(t, faultBench(t, "  - {role: thermometer, kind: delay, delay: 5s, after_commands: 1}\n"))
		_, c := driver(t, b, instr.RoleThermometer)
		_, err := c.QueryNumber(ctx, "MEAS:TEMP?")
		if !errors.Is(err, link.ErrTimeout) {
			t.Fatalf("delayed reply: err = %v, want link.ErrTimeout", err)
		}
		if clk.Waiters() != 1 {
			t.Fatalf("the bench holds %d delayed replies, want 1", clk.Waiters())
		}
		clk.Advance(5 * time.Second)
		// State, not time: the late reply is out once the line neither
		// holds it nor is busy writing it.
		th := b.insts[instr.RoleThermometer]
		for k := 0; ; k++ {
			b.mu.Lock()
			out := !th.holding && !th.busy
			b.mu.Unlock()
			if out {
				break
			}
			if k == 10000 {
				t.Fatal("the delayed reply was never sent")
			}
			time.Sleep(time.Millisecond)
		}
		id, err := c.Identify(ctx)
		if err != nil || len(fields(id)) != 4 {
			t.Errorf("after the delay: %q, %v", id, err)
		}
	})
	t.Run("hangup is a disconnect, and reconnecting works", func(t *testing.T) {
		if os.Geteuid() != 0 && os.Getenv("CI") != "true" {
			t.Skip("hanging up a pty (TIOCVHANGUP) needs CAP_SYS_ADMIN; run as root, as CI does")
		}
		b, clk := startBench(t, faultBench(t, "  - {role: integrator, kind: hangup, at: 1s}\n"))
		conn, c := driver(t, b, instr.RoleIntegrator)
		if _, err := c.Identify(ctx); err != nil {
			t.Fatal(err)
		}
		clk.Advance(1100 * time.Millisecond)
		b.Truth() // runs the timed fault now
		var err error
		for i := 0; i < 40; i++ { // the serving loop hangs up within its poll slice
			if _, err = c.Identify(ctx); err != nil {
				break
			}
		}
		if !errors.Is(err, link.ErrDisconnected) {
			t.Fatalf("after hang-up: err = %v, want link.ErrDisconnected", err)
		}
		if err := conn.Reconnect(ctx); err != nil {
			t.Fatal(err)
		}
		c.Forget()
		if id, err := c.Identify(ctx); err != nil || !strings.Contains(id, "FLUX-INTEGRATOR") {
			t.Errorf("after reconnect: %q, %v", id, err)
		}
	})
	t.Run("error is an instrument error", func(t *testing.T) {
		b, clk := startBench(t, faultBench(t, "  - {role: field_meter, kind: error, at: 1s, code: -310, message: \"System error;probe \\\"B\\\"\"}\n"))
		_, c := driver(t, b, instr.RoleFieldMeter)
		if err := c.Set(ctx, "FIEL:RANG 1.0E-01"); err != nil {
			t.Fatal(err)
		}
		clk.Advance(2 * time.Second)
		err := c.Set(ctx, "FIEL:RANG 1.0E-01")
		var ie *scpi.InstrumentError
		if !errors.As(err, &ie) || ie.Code != -310 || ie.Msg != `System error;probe "B"` {
			t.Fatalf("err = %v, want *scpi.InstrumentError -310", err)
		}
	})
	t.Run("trip shows in the status register and refuses output", func(t *testing.T) {
		b, clk := startBench(t, faultBench(t, "  - {role: supply, kind: trip, at: 1s}\n"))
		_, c := driver(t, b, instr.RoleSupply)
		for _, cmd := range []string{"SOUR:CURR 1.0", "OUTP ON"} {
			if err := c.Set(ctx, cmd); err != nil {
				t.Fatal(err)
			}
		}
		clk.Advance(2 * time.Second)
		st, err := c.QueryNumber(ctx, "STAT:QUES:COND?")
		if err != nil {
			t.Fatal(err)
		}
		if int(st)&(1<<2) == 0 || int(st)&(1<<3) != 0 {
			t.Errorf("status %v: want trip (bit 2) set, output (bit 3) clear", st)
		}
		if tr := b.Truth(); !tr.Tripped || tr.I != 0 {
			t.Errorf("truth: tripped %v, I = %g A; want tripped and ramped to 0", tr.Tripped, tr.I)
		}
		var ie *scpi.InstrumentError
		if err := c.Set(ctx, "OUTP ON"); !errors.As(err, &ie) || ie.Code != -221 {
			t.Errorf("output on while tripped: %v, want -221", err)
		}
		if err := c.Set(ctx, "*RST"); err != nil {
			t.Fatal(err)
		}
		if err := c.Set(ctx, "OUTP ON"); err != nil {
			t.Errorf("after *RST (winding cool): %v", err)
		}
	})
}

// TestRandomFaultsFollowTheSeed: a random fault fires at the same commands
// in two runs with one seed.
func TestRandomFaultsFollowTheSeed(t *testing.T) {
	ctx := context.Background()
	pattern := func() string {
		b, _ := startBench(t, faultBench(t, "  - {role: thermometer, kind: garble, probability: 0.3}\n"))
		_, c := driver(t, b, instr.RoleThermometer)
		var s strings.Builder
		for i := 0; i < 30; i++ {
			if _, err := c.QueryNumber(ctx, "MEAS:TEMP?"); err != nil {
				s.WriteByte('x')
			} else {
				s.WriteByte('.')
			}
		}
		return s.String()
	}
	p1, p2 := pattern(), pattern()
	if p1 != p2 {
		t.Errorf("runs differ:\n%s\n%s", p1, p2)
	}
	if n := strings.Count(p1, "x"); n < 3 || n > 18 {
		t.Errorf("%d of 30 replies garbled at p = 0.3: %s", n, p1)
	}
}

// TestLateReplyInSimulatedTime: on simulated time (clock.Sim) the clock
// stands still while a client waits for a reply, so a reply held for its
// delay would come only after the client's next sleep. The bench models a
// late reply instead: the client's read times out, and the held reply goes
// out once the client writes its next command line, just before that
// line's own reply, without simulated time moving — the order a late reply
// takes on a real line when the client has given up on it.
func TestLateReplyInSimulatedTime(t *testing.T) {
	ctx := context.Background()
	clk := clock.NewSim(time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC))
	b, err := Start(ctx, faultBench(t, "  - {role: thermometer, kind: delay, delay: 800ms, after_commands: 1}\n"), WithClock(clk))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { b.Close() })
	_, c := driver(t, b, instr.RoleThermometer)
	t0 := clk.Now()
	if _, err := c.QueryNumber(ctx, "MEAS:TEMP?"); !errors.Is(err, link.ErrTimeout) {
		t.Fatalf("delayed reply: err = %v, want link.ErrTimeout", err)
	}
	// The next query's first line is the late reply (a temperature where an
	// identity is due): the client must skip it, as it does after a resync.
	id, skipped, err := c.QueryMatch(ctx, "*IDN?", func(l string) bool { return strings.Contains(l, "THERMOMETER") })
	if err != nil {
		t.Fatalf("*IDN? after the late reply: %v", err)
	}
	if len(skipped) != 1 {
		t.Fatalf("lines before the identity %q: %q, want the one late reply", id, skipped)
	}
	if _, err := strconv.ParseFloat(strings.TrimSpace(skipped[0]), 64); err != nil {
		t.Errorf("the late line %q is not the held temperature reading", skipped[0])
	}
	if d := clk.Now().Sub(t0); d != 0 {
		t.Errorf("simulated time moved %s: nobody slept", d)
	}
	if v, err := c.QueryNumber(ctx, "MEAS:TEMP?"); err != nil || v < 0 || v > 100 {
		t.Errorf("the next reading: %g, %v", v, err)
	}
}
