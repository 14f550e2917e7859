package profile

import (
	"context"
	"errors"
	"log/slog"
	"strings"
	"testing"
	"time"

	"hystd/drivers/scpi"
	"hystd/drivers/scpi/scpitest"
)

func scriptOf(t *testing.T, d dialect, steps ...ex) *scpitest.Script {
	return scpitest.New(t, d.wt, d.rt, steps...)
}

func noSleep(context.Context, time.Duration) error { return nil }

var discard = slog.New(slog.DiscardHandler)

// A reply left on the line by a process killed mid-exchange answers the
// first *IDN? of the next one before the identity does: it is discarded,
// and the supply is identified (it was refused as "wrong instrument").
func TestStaleReplyAtStartIsDiscarded(t *testing.T) {
	p, err := Load("sim-supply")
	if err != nil {
		t.Fatal(err)
	}
	st := simSupply.startup
	script := scriptOf(t, simSupply, append([]ex{
		{Send: "*IDN?", Raw: []byte("7.000000E-01\n0,\"No error\"\n" + st[0].Reply + "\n")}},
		st[1:]...)...)
	s, err := NewSupply(context.Background(), p, script, Options{Sleep: noSleep, Log: discard})
	if err != nil {
		t.Fatalf("stale replies at start made identification fail: %v", err)
	}
	s.Close()
}

// A supply that answers, but not with its identity, is ErrIdentity naming
// what it said.
func TestWrongIdentityNamesTheReply(t *testing.T) {
	p, err := Load("sim-supply")
	if err != nil {
		t.Fatal(err)
	}
	p.SyncQuery, p.SyncReply = "", "" // defaults
	other := ex{Send: "*IDN?", Reply: "OTHER-MAKER,BOX,1,1"}
	script := scriptOf(t, simSupply, other, other, other) // asked three times before concluding
	_, err = NewSupply(context.Background(), p, script, Options{Sleep: noSleep, Log: discard})
	if !errors.Is(err, ErrIdentity) || !strings.Contains(err.Error(), "OTHER-MAKER,BOX,1,1") {
		t.Fatalf("got %v", err)
	}
}

// A reading that does not parse for its query is desynchronisation: an
// error (never a value), and the next read resynchronises first.
func TestUnparsableReadingIsDesync(t *testing.T) {
	r := newRig(t, simFieldMeter,
		ex{Send: "MEAS:FIEL?", Reply: `0,"No error"`}, // an error-queue reply where a field was due
		simFieldMeter.sync(),
		ex{Send: "MEAS:FIEL?", Reply: "1.000000E-01"},
	)
	f := r.fieldMeter(t)
	_, err := f.ReadField(context.Background())
	if !errors.Is(err, scpi.ErrDesync) {
		t.Fatalf("got %v, want scpi.ErrDesync", err)
	}
	v, err := f.ReadField(context.Background())
	if err != nil || v.Value != 0.1 {
		t.Fatalf("got %v, %v", v, err)
	}
}

func TestSeverity(t *testing.T) {
	p := Profile{ErrorSeverity: map[string]string{"-399..-300": "warn", "-310": "fail", "-200..-100": "warn", "-150..-140": "fail"}}
	for _, tc := range []struct {
		code int
		want string
	}{
		{-310, SeverityFail}, // exact code before a range
		{-350, SeverityWarn},
		{-145, SeverityFail}, // the narrower range
		{-102, SeverityWarn},
		{-222, SeverityFail}, // named by nothing
		{5, SeverityFail},
	} {
		if got := p.Severity(tc.code); got != tc.want {
			t.Errorf("Severity(%d) = %s, want %s", tc.code, got, tc.want)
		}
	}
	bad, err := Load("sim-fieldmeter")
	if err != nil {
		t.Fatal(err)
	}
	bad.ErrorSeverity = map[string]string{"-3x": "warn", "-300": "maybe"}
	err = Validate(bad)
	if err == nil || !strings.Contains(err.Error(), `error_severity.-3x`) || !strings.Contains(err.Error(), `"maybe": want warn or fail`) {
		t.Errorf("got %v", err)
	}
}

// A garbled identity (one flipped byte) is asked again, not taken for
// another instrument.
func TestGarbledIdentityAskedAgain(t *testing.T) {
	p, err := Load("sim-supply")
	if err != nil {
		t.Fatal(err)
	}
	st := simSupply.startup
	script := scriptOf(t, simSupply, append([]ex{{Send: "*IDN?", Reply: "H\x19STD-SIM,BIPOLAR-SUPPLY,0,1"}}, st...)...)
	s, err := NewSupply(context.Background(), p, script, Options{Sleep: noSleep, Log: discard})
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
}

// An error the instrument raised before the port was opened is not erased
// by the init sequence's *CLS: the first PollErrors returns it.
func TestErrorAtOpenKeptForPoll(t *testing.T) {
	p, err := Load("sim-fieldmeter")
	if err != nil {
		t.Fatal(err)
	}
	st := simFieldMeter.startup
	script := scriptOf(t, simFieldMeter, st[0], ex{Send: "SYST:ERR?", Reply: `-310,"System error"`}, st[1], st[2], st[3],
		simFieldMeter.noErr)
	f, err := NewFieldMeter(context.Background(), p, script, Options{Sleep: noSleep, Log: discard})
	if err != nil {
		t.Fatal(err)
	}
	errs, err := f.PollErrors(context.Background())
	if err != nil || len(errs) != 1 || errs[0].Code != -310 || !errs[0].Fail || !strings.Contains(errs[0].Msg, "when the port was opened") {
		t.Fatalf("got %+v, %v", errs, err)
	}
}

// An error entry read from the queue just before the next reply of the
// drain is spoiled (here a garbled `0,"No error"`: one flipped bit) is off
// the instrument's queue: the failed poll keeps it, and the poll after the
// resynchronisation returns it — it was lost before, and the run that
// polled never named the error.
func TestErrorReadBeforeSpoiledReplyKept(t *testing.T) {
	r := newRig(t, simFieldMeter,
		ex{Send: "SYST:ERR?", Reply: `-310,"campaign fault 7"`},
		ex{Send: "SYST:ERR?", Reply: `p,"No error"`},
		simFieldMeter.sync(),
		simFieldMeter.noErr,
	)
	f := r.fieldMeter(t)
	errs, err := f.PollErrors(context.Background())
	if !errors.Is(err, scpi.ErrDesync) || len(errs) != 1 || errs[0].Code != -310 {
		t.Fatalf("first poll: got %+v, %v; want scpi.ErrDesync with the -310 entry read before it", errs, err)
	}
	// The entry is returned (and kept): the failure does not name it as
	// well, or a run names it twice (the campaign saw both in one run).
	if strings.Contains(err.Error(), "campaign fault 7") {
		t.Errorf("the failure %q names the entry it returns", err)
	}
	errs, err = f.PollErrors(context.Background())
	if err != nil || len(errs) != 1 || errs[0].Code != -310 || errs[0].Msg != "campaign fault 7" {
		t.Fatalf("second poll: got %+v, %v; want the -310 entry read before the spoiled reply", errs, err)
	}
}

// A reply of the error query that comes late carries an entry the
// instrument has already removed from its queue: the resync that discards
// it keeps the entry, and the next poll returns it. The campaign found an
// error the supply raised lost this way (seen only in the log's
// "resynchronised … stale_lines").
func TestLateErrorReplyKept(t *testing.T) {
	r := newRig(t, simSupply,
		ex{Send: "SYST:ERR?", Reply: `-315,"campaign fault 4000"`, Err: scpitest.Timeout},
		simSupply.sync(),
		simSupply.noErr,
	)
	s := r.supply(t)
	if errs, err := s.PollErrors(context.Background()); err == nil || len(errs) != 0 {
		t.Fatalf("first poll: got %+v, %v; want the timeout and nothing read", errs, err)
	}
	errs, err := s.PollErrors(context.Background())
	if err != nil || len(errs) != 1 || errs[0].Code != -315 || errs[0].Msg != "campaign fault 4000" {
		t.Fatalf("second poll: got %+v, %v; want the -315 entry whose reply came late", errs, err)
	}
}
