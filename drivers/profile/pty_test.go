package profile

import (
	"context"
	"errors"
	"log/slog"
	"strconv"
	"strings"
	"sync"
	"testing"

	"hystd/drivers/link"
	"hystd/drivers/link/linktest"
)

// bench is a tiny instrument stand-in for the sim dialect, served on ptys
// (the real simulated bench lives in drivers/sim; this one only echoes state
// so the serial path is exercised without depending on it).
type bench struct {
	mu      sync.Mutex
	current float64
	output  bool
	flux    float64
	field   float64
	errs    []string
	// hangup, when set, is called instead of answering MEAS:CURR? once.
	hangup func()
}

func (b *bench) handle(id string) linktest.Handler {
	return func(cmd string) (string, bool) {
		b.mu.Lock()
		defer b.mu.Unlock()
		switch {
		case cmd == "*IDN?":
			return id, true
		case cmd == "*CLS":
			b.errs = nil
			return "", false
		case cmd == "*OPC?":
			return "1", true
		case cmd == "SYST:ERR?":
			if len(b.errs) == 0 {
				return `0,"No error"`, true
			}
			e := b.errs[0]
			b.errs = b.errs[1:]
			return e, true
		case strings.HasPrefix(cmd, "SOUR:CURR "):
			v, err := strconv.ParseFloat(strings.TrimPrefix(cmd, "SOUR:CURR "), 64)
			if err != nil {
				b.errs = append(b.errs, `-104,"Data type error"`)
				return "", false
			}
			b.current = v
			b.flux = 2e-4 * v // a linear "specimen"
			b.field = 0.05 * v
			return "", false
		case cmd == "MEAS:CURR?":
			if h := b.hangup; h != nil {
				b.hangup = nil
				go h()
				return "", false
			}
			return strconv.FormatFloat(b.current, 'E', 6, 64), true
		case cmd == "MEAS:VOLT?":
			return strconv.FormatFloat(0.8*b.current, 'E', 6, 64), true
		case cmd == "OUTP ON", cmd == "OUTP OFF":
			b.output = cmd == "OUTP ON"
			return "", false
		case cmd == "INT:RES":
			b.flux = 0
			return "", false
		case cmd == "FETC:FLUX?":
			return strconv.FormatFloat(b.flux, 'E', 6, 64), true
		case cmd == "MEAS:FIEL?":
			return strconv.FormatFloat(b.field, 'E', 6, 64), true
		}
		b.errs = append(b.errs, `-113,"Undefined header"`)
		return "", false
	}
}

func servePTY(t *testing.T, h linktest.Handler) *linktest.PTY {
	t.Helper()
	p, err := linktest.Open()
	if err != nil {
		t.Skipf("no pseudo-terminals: %v", err)
	}
	r := linktest.Serve(p, "\n", "\n", 0, h)
	t.Cleanup(func() { r.Stop(); p.Close() })
	return p
}

func quiet() Options { return Options{Log: slog.New(slog.DiscardHandler)} }

// TestEndToEndOverPTY: set and read current, reset and read the
// integrator, read the field, all through go.bug.st/serial on real ptys.
func TestEndToEndOverPTY(t *testing.T) {
	ctx := context.Background()
	b := &bench{}
	ps := servePTY(t, b.handle("HYSTD-SIM,BIPOLAR-SUPPLY,0,1"))
	pi := servePTY(t, b.handle("HYSTD-SIM,FLUX-INTEGRATOR,0,1"))
	pf := servePTY(t, b.handle("HYSTD-SIM,HALL-METER,0,1"))

	sup, err := OpenSupply(ctx, Spec{Port: ps.Path, Profile: "sim-supply"}, quiet())
	if err != nil {
		t.Fatal(err)
	}
	defer sup.Close()
	integ, err := OpenIntegrator(ctx, Spec{Port: pi.Path, Profile: "sim-integrator"}, quiet())
	if err != nil {
		t.Fatal(err)
	}
	defer integ.Close()
	fm, err := OpenFieldMeter(ctx, Spec{Port: pf.Path, Profile: "sim-fieldmeter"}, quiet())
	if err != nil {
		t.Fatal(err)
	}
	defer fm.Close()

	if err := integ.Reset(ctx); err != nil {
		t.Fatal(err)
	}
	if err := sup.SetOutput(ctx, true); err != nil {
		t.Fatal(err)
	}
	if err := sup.SetCurrent(ctx, 1.25); err != nil {
		t.Fatal(err)
	}
	i, err := sup.ReadCurrent(ctx)
	if err != nil || i.Value != 1.25 || i.Unit != "A" {
		t.Fatalf("current %+v, %v", i, err)
	}
	psi, err := integ.ReadFlux(ctx)
	if err != nil || !near(psi.Value, 2.5e-4) {
		t.Fatalf("flux %+v, %v", psi, err)
	}
	bf, err := fm.ReadField(ctx)
	if err != nil || !near(bf.Value, 0.0625) {
		t.Fatalf("field %+v, %v", bf, err)
	}
	if err := integ.Reset(ctx); err != nil {
		t.Fatal(err)
	}
	if psi, _ := integ.ReadFlux(ctx); psi.Value != 0 {
		t.Fatalf("flux after reset %v", psi.Value)
	}
	// Out of range: rejected before anything is sent.
	if err := sup.SetCurrent(ctx, 30); !errors.As(err, new(*RangeError)) {
		t.Fatalf("got %v", err)
	}
	if err := sup.Halt(ctx); err != nil {
		t.Fatal(err)
	}
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.current != 0 || b.output {
		t.Fatalf("after Halt: %v A, output %v", b.current, b.output)
	}
}

// TestHangupMidQueryReconnects: the supply's port hangs up while a query is
// pending; the adapter comes back under the same by-id style name on a new
// pty. The query's error is reported (not hidden), the device reconnects and
// re-identifies, and the next query succeeds.
func TestHangupMidQueryReconnects(t *testing.T) {
	ctx := context.Background()
	b := &bench{}
	id := "HYSTD-SIM,BIPOLAR-SUPPLY,0,1"
	p1, err := linktest.Open()
	if err != nil {
		t.Skipf("no pseudo-terminals: %v", err)
	}
	r1 := linktest.Serve(p1, "\n", "\n", 0, b.handle(id))
	l, err := linktest.NewLink(t.TempDir(), "usb-bench-supply-if00", p1.Path)
	if err != nil {
		t.Fatal(err)
	}
	var p2 *linktest.PTY
	var r2 *linktest.Responder
	moved := make(chan struct{})
	b.mu.Lock() // publishes the hook (and r1, l) to the responder goroutine
	b.hangup = func() {
		r1.Stop()
		p1.Close() // hang-up: the slave reads EOF/EIO
		defer close(moved)
		p, err := linktest.Open()
		if err != nil {
			t.Errorf("second pty: %v", err)
			return
		}
		p2, r2 = p, linktest.Serve(p, "\n", "\n", 0, b.handle(id))
		l.Point(p.Path)
	}
	b.mu.Unlock()
	t.Cleanup(func() {
		select {
		case <-moved:
			if r2 != nil {
				r2.Stop()
				p2.Close()
			}
		default: // the hang-up never happened
			r1.Stop()
			p1.Close()
		}
	})
	sup, err := OpenSupply(ctx, Spec{Port: l.Path, Profile: "sim-supply"}, quiet())
	if err != nil {
		t.Fatal(err)
	}
	defer sup.Close()
	if err := sup.SetCurrent(ctx, 0.5); err != nil {
		t.Fatal(err)
	}
	_, err = sup.ReadCurrent(ctx)
	var oe *OpError
	if !errors.As(err, &oe) || !oe.Reconnected || !errors.Is(err, link.ErrDisconnected) {
		t.Fatalf("got %v, want a reported disconnect with the port reconnected", err)
	}
	<-moved
	rd, err := sup.ReadCurrent(ctx)
	if err != nil || rd.Value != 0.5 {
		t.Fatalf("after reconnect: %+v, %v", rd, err)
	}
	if got := sup.(*Supply).port.(*link.Conn).Path(); got != l.Path {
		t.Fatalf("reopened %q", got)
	}
}
