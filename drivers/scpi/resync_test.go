package scpi

import (
	"context"
	"errors"
	"strings"
	"testing"

	"hystd/drivers/link"
	"hystd/drivers/scpi/scpitest"
)

// syncClient is a client that resynchronises with *IDN? answered by an
// identity containing "HYSTD-TEST" (an invented instrument).
func syncClient(t *testing.T, steps ...ex) *Client {
	s := scpitest.New(t, "\n", "\n", steps...)
	return New(s, Options{Name: "t", ErrorQuery: "SYST:ERR?", SyncQuery: "*IDN?",
		SyncReply: func(l string) bool { return strings.Contains(l, "HYSTD-TEST") }})
}

// A reply that comes after its timeout, and after the line was found quiet,
// is discarded by the sync exchange: it never answers the next query, so a
// channel is never shifted by one reading.
func TestLateReplyAfterQuietIsDiscardedBySync(t *testing.T) {
	ctx := context.Background()
	tests := []struct {
		name string
		sync ex
	}{
		{"late reply before the identity", ex{Send: "*IDN?", Raw: []byte("1.250000E-01\nHYSTD-TEST,UNIT,1,1.0\n")}},
		{"two late replies", ex{Send: "*IDN?", Raw: []byte("1.250000E-01\n0,\"No error\"\nHYSTD-TEST,UNIT,1,1.0\n")}},
		{"reply lost for good", ex{Send: "*IDN?", Reply: "HYSTD-TEST,UNIT,1,1.0"}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			c := syncClient(t,
				ex{Send: "MEAS:FIEL?", Err: scpitest.Timeout},
				tc.sync,
				ex{Send: "MEAS:FIEL?", Reply: "2.500000E-01"},
			)
			if _, err := c.Query(ctx, "MEAS:FIEL?"); !errors.Is(err, link.ErrTimeout) {
				t.Fatalf("got %v, want a timeout", err)
			}
			if !c.Stale() {
				t.Fatal("a timed-out exchange must leave the line stale")
			}
			v, err := c.QueryNumber(ctx, "MEAS:FIEL?")
			if err != nil || v != 0.25 {
				t.Fatalf("got %v, %v; want 0.25, the answer to this query, not the late one", v, err)
			}
			if c.Stale() {
				t.Fatal("line still stale after a good sync")
			}
		})
	}
}

// A sync answered by something that never contains the identity fails as a
// timeout and leaves the line stale; nothing is taken for a value.
func TestSyncWithoutIdentityFails(t *testing.T) {
	ctx := context.Background()
	c := syncClient(t,
		ex{Send: "MEAS:FIEL?", Err: scpitest.Timeout},
		ex{Send: "*IDN?", Reply: "7.0"},
	)
	c.o.SyncTimeout = 50e6 // 50 ms
	_, _ = c.Query(ctx, "MEAS:FIEL?")
	_, err := c.Query(ctx, "MEAS:FIEL?")
	if !errors.Is(err, link.ErrTimeout) || !strings.Contains(err.Error(), "resynchronising") || !strings.Contains(err.Error(), `"7.0"`) {
		t.Fatalf("got %v", err)
	}
	if !c.Stale() {
		t.Fatal("a failed sync must leave the line stale")
	}
}

// Desync marks the line and the error says so.
func TestDesyncMarksStale(t *testing.T) {
	ctx := context.Background()
	c := syncClient(t,
		ex{Send: "MEAS:CURR?", Reply: `0,"No error"`},
		ex{Send: "*IDN?", Reply: "HYSTD-TEST,UNIT,1,1.0"},
		ex{Send: "MEAS:CURR?", Reply: "1.5"},
	)
	s, err := c.Query(ctx, "MEAS:CURR?")
	if err != nil {
		t.Fatal(err)
	}
	_, perr := ParseNumber(s)
	err = c.Desync("MEAS:CURR?", perr)
	if !errors.Is(err, ErrDesync) || !c.Stale() {
		t.Fatalf("got %v, stale %v", err, c.Stale())
	}
	if v, err := c.QueryNumber(ctx, "MEAS:CURR?"); err != nil || v != 1.5 {
		t.Fatalf("got %v, %v", v, err)
	}
}

// QueryMatch skips lines left by a previous exchange (or process).
func TestQueryMatchSkipsStaleLines(t *testing.T) {
	c := syncClient(t, ex{Send: "*IDN?", Raw: []byte("3.2E-01\n1\nHYSTD-TEST,UNIT,1,1.0\n")})
	l, skipped, err := c.QueryMatch(context.Background(), "*IDN?", func(s string) bool { return strings.HasPrefix(s, "HYSTD-TEST") })
	if err != nil || l != "HYSTD-TEST,UNIT,1,1.0" || len(skipped) != 2 {
		t.Fatalf("got %q %q %v", l, skipped, err)
	}
}

// Every exchange that breaks off is counted once, when it breaks, whether
// the reply timed out, did not parse, or the call was cut short by its own
// context (a read abandoned when the run failed on another instrument): a
// run names the count, so a fault whose call never reached anyone still
// leaves a trace. A failed sync does not count again, and a good exchange
// not at all.
func TestBreaksCounted(t *testing.T) {
	ctx := context.Background()
	c := syncClient(t,
		ex{Send: "MEAS:FIEL?", Err: scpitest.Timeout}, // 1: lost
		ex{Send: "*IDN?", Reply: "7.0"},               // the sync fails: still 1
		ex{Send: "*IDN?", Reply: "HYSTD-TEST,UNIT,1,1.0"},
		ex{Send: "MEAS:FIEL?", Reply: "0.25"},         // good
		ex{Send: "MEAS:CURR?", Reply: `0,"No error"`}, // 2: does not parse
		ex{Send: "*IDN?", Reply: "HYSTD-TEST,UNIT,1,1.0"},
		ex{Send: "MEAS:CURR?", Err: context.Canceled}, // 3: cut short by the caller's context
	)
	c.o.SyncTimeout = 50e6 // 50 ms
	_, _ = c.Query(ctx, "MEAS:FIEL?")
	if _, err := c.Query(ctx, "MEAS:FIEL?"); err == nil {
		t.Fatal("the sync answered by 7.0 succeeded")
	}
	if n := c.Breaks(); n != 1 {
		t.Fatalf("after a timeout and a failed sync: %d breaks, want 1", n)
	}
	if _, err := c.QueryNumber(ctx, "MEAS:FIEL?"); err != nil {
		t.Fatal(err)
	}
	s, err := c.Query(ctx, "MEAS:CURR?")
	if err != nil {
		t.Fatal(err)
	}
	_, perr := ParseNumber(s)
	_ = c.Desync("MEAS:CURR?", perr)
	if n := c.Breaks(); n != 2 {
		t.Fatalf("after a reply that does not parse: %d breaks, want 2", n)
	}
	if _, err := c.Query(ctx, "MEAS:CURR?"); !errors.Is(err, context.Canceled) {
		t.Fatalf("got %v, want the call cut short (context.Canceled)", err)
	}
	if n := c.Breaks(); n != 3 {
		t.Fatalf("after a call cut short: %d breaks, want 3", n)
	}
}
