package profile

import (
	"context"
	"errors"
	"log/slog"
	"math"
	"strings"
	"testing"
	"time"

	"hystd/drivers/instr"
	"hystd/drivers/link"
	"hystd/drivers/scpi"
	"hystd/drivers/scpi/scpitest"
)

type ex = scpitest.Exchange

// dialect describes how a profile greets the instrument, for scripts.
type dialect struct {
	profile  string
	wt, rt   string // write and read terminators, as the test expects them
	startup  []ex   // *IDN? and init with their error-queue reads
	noErr    ex     // one empty error-queue read
	errEntry string // an error-queue reply with code -222
}

// sync is the exchange that brings a line back in step after a timeout or
// a reply that does not parse: the profile's sync query, answered with the
// identity (the startup's first reply).
func (d dialect) sync() ex { return ex{Send: "*IDN?", Reply: d.startup[0].Reply} }

var (
	simSupply = dialect{profile: "sim-supply", wt: "\n", rt: "\n",
		startup: []ex{{Send: "*IDN?", Reply: "HYSTD-SIM,BIPOLAR-SUPPLY,0,1"}, {Send: "SYST:ERR?", Reply: `0,"No error"`}, {Send: "*CLS"}, {Send: "SYST:ERR?", Reply: `0,"No error"`}},
		noErr:   ex{Send: "SYST:ERR?", Reply: `0,"No error"`}, errEntry: `-222,"Data out of range"`}
	simIntegrator = dialect{profile: "sim-integrator", wt: "\n", rt: "\n",
		startup: []ex{{Send: "*IDN?", Reply: "HYSTD-SIM,FLUX-INTEGRATOR,0,1"}, {Send: "SYST:ERR?", Reply: `0,"No error"`}, {Send: "*CLS"}, {Send: "SYST:ERR?", Reply: `0,"No error"`}},
		noErr:   ex{Send: "SYST:ERR?", Reply: `0,"No error"`}, errEntry: `-222,"Data out of range"`}
	simFieldMeter = dialect{profile: "sim-fieldmeter", wt: "\n", rt: "\n",
		startup: []ex{{Send: "*IDN?", Reply: "HYSTD-SIM,HALL-METER,0,1"}, {Send: "SYST:ERR?", Reply: `0,"No error"`}, {Send: "*CLS"}, {Send: "SYST:ERR?", Reply: `0,"No error"`}},
		noErr:   ex{Send: "SYST:ERR?", Reply: `0,"No error"`}, errEntry: `-222,"Data out of range"`}
	simThermometer = dialect{profile: "sim-thermometer", wt: "\n", rt: "\n",
		startup: []ex{{Send: "*IDN?", Reply: "HYSTD-SIM,THERMOMETER,0,1"}, {Send: "SYST:ERR?", Reply: `0,"No error"`}, {Send: "*CLS"}, {Send: "SYST:ERR?", Reply: `0,"No error"`}},
		noErr:   ex{Send: "SYST:ERR?", Reply: `0,"No error"`}, errEntry: `-222,"Data out of range"`}
	slateSupply = dialect{profile: "slate-supply", wt: "\r\n", rt: "\r\n",
		startup: []ex{{Send: "*IDN?", Reply: "DIALECT-SLATE,BIPOLAR-40,SN7,2.1"}, {Send: "ERR:NEXT?", Reply: `0,"none"`}, {Send: "*CLS"}, {Send: "ERR:NEXT?", Reply: `0,"none"`},
			{Send: "REMOTE:LOCK 1"}, {Send: "ERR:NEXT?", Reply: `0,"none"`}},
		noErr: ex{Send: "ERR:NEXT?", Reply: `0,"none"`}, errEntry: `-222,"value beyond limit"`}
	slateFieldMeter = dialect{profile: "slate-fieldmeter", wt: "\r\n", rt: "\r\n",
		startup: []ex{{Send: "*IDN?", Reply: "DIALECT-SLATE,HALL-3,SN2,1.0"}, {Send: "ERR:NEXT?", Reply: `0,"none"`}, {Send: "*CLS"}, {Send: "ERR:NEXT?", Reply: `0,"none"`},
			{Send: "PROBE:UNIT TESLA"}, {Send: "ERR:NEXT?", Reply: `0,"none"`}},
		noErr: ex{Send: "ERR:NEXT?", Reply: `0,"none"`}, errEntry: `-222,"value beyond limit"`}
	quillSupply = dialect{profile: "quill-supply", wt: "\r", rt: "\r",
		startup: []ex{{Send: "*IDN?", Reply: "QUILL-DIALECT BPS10 V3"}, {Send: "E?", Reply: "0"}, {Send: "RMT"}, {Send: "E?", Reply: "0"}},
		noErr:   ex{Send: "E?", Reply: "0"}, errEntry: `-222,"RANGE"`}
	quillIntegrator = dialect{profile: "quill-integrator", wt: "\r", rt: "\r",
		startup: []ex{{Send: "*IDN?", Reply: "QUILL-DIALECT FLX2 V1"}, {Send: "E?", Reply: "0"}, {Send: "RMT"}, {Send: "E?", Reply: "0"}},
		noErr:   ex{Send: "E?", Reply: "0"}, errEntry: `-222,"RANGE"`}
)

// sleeps records injected waits.
type sleeps struct{ d []time.Duration }

func (s *sleeps) sleep(ctx context.Context, d time.Duration) error {
	s.d = append(s.d, d)
	return ctx.Err()
}

// clock is an injected clock advancing 2 ms per call.
type clock struct{ t time.Time }

func (c *clock) now() time.Time { c.t = c.t.Add(2 * time.Millisecond); return c.t }

type rig struct {
	script *scpitest.Script
	sleeps *sleeps
	opts   Options
	prof   Profile
}

func newRig(t *testing.T, d dialect, steps ...ex) *rig {
	t.Helper()
	p, err := Load(d.profile)
	if err != nil {
		t.Fatal(err)
	}
	all := append(append([]ex{}, d.startup...), steps...)
	r := &rig{script: scpitest.New(t, d.wt, d.rt, all...), sleeps: &sleeps{}, prof: p}
	c := &clock{t: time.Unix(0, 0)}
	r.opts = Options{Log: slog.New(slog.DiscardHandler), Sleep: r.sleeps.sleep, Now: c.now}
	return r
}

func (r *rig) supply(t *testing.T) *Supply {
	t.Helper()
	s, err := NewSupply(context.Background(), r.prof, r.script, r.opts)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func (r *rig) integrator(t *testing.T) *Integrator {
	t.Helper()
	s, err := NewIntegrator(context.Background(), r.prof, r.script, r.opts)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func (r *rig) fieldMeter(t *testing.T) *FieldMeter {
	t.Helper()
	s, err := NewFieldMeter(context.Background(), r.prof, r.script, r.opts)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func (r *rig) thermometer(t *testing.T) *Thermometer {
	t.Helper()
	s, err := NewThermometer(context.Background(), r.prof, r.script, r.opts)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// Error checks used by the tables.
type check func(t *testing.T, err error)

func noError(t *testing.T, err error) {
	t.Helper()
	if err != nil {
		t.Fatalf("unexpected error: %v", err)
	}
}

func isInstrumentError(code int) check {
	return func(t *testing.T, err error) {
		t.Helper()
		var ie *scpi.InstrumentError
		if !errors.As(err, &ie) || ie.Code != code {
			t.Fatalf("got %v, want instrument error %d", err, code)
		}
	}
}

func isRange(t *testing.T, err error) {
	t.Helper()
	var re *RangeError
	if !errors.As(err, &re) {
		t.Fatalf("got %v, want *RangeError", err)
	}
}

func isParse(reply string) check {
	return func(t *testing.T, err error) {
		t.Helper()
		var pe *scpi.ParseError
		if !errors.As(err, &pe) || pe.Reply != reply {
			t.Fatalf("got %v, want a parse error naming reply %q", err, reply)
		}
		var oe *OpError
		if !errors.As(err, &oe) || oe.Op == "" {
			t.Fatalf("got %v, want the operation named", err)
		}
	}
}

func isOverrange(t *testing.T, err error) {
	t.Helper()
	if !errors.Is(err, ErrOverrange) {
		t.Fatalf("got %v, want ErrOverrange", err)
	}
}

func isTimeout(t *testing.T, err error) {
	t.Helper()
	if !errors.Is(err, link.ErrTimeout) {
		t.Fatalf("got %v, want link.ErrTimeout", err)
	}
}

func isText(sub string) check {
	return func(t *testing.T, err error) {
		t.Helper()
		if err == nil || !strings.Contains(err.Error(), sub) {
			t.Fatalf("got %v, want an error containing %q", err, sub)
		}
	}
}

// near compares within a relative 1e-12 (floating-point scaling only).
func near(a, b float64) bool {
	return a == b || math.Abs(a-b) <= 1e-12*math.Max(math.Abs(a), math.Abs(b))
}

func checkReading(t *testing.T, r instr.Reading, err error, want float64, unit string, c check) {
	t.Helper()
	if c != nil {
		c(t, err)
		if err != nil {
			return
		}
	} else if err != nil {
		t.Fatalf("unexpected error: %v", err)
	}
	if !near(r.Value, want) || r.Unit != unit {
		t.Fatalf("reading %v %s, want %v %s", r.Value, r.Unit, want, unit)
	}
	if r.At.IsZero() || r.AtUncertainty <= 0 {
		t.Fatalf("reading not stamped: at %v ± %v", r.At, r.AtUncertainty)
	}
}
