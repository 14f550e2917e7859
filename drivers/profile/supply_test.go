package profile

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"

	"hystd/drivers/link"
	"hystd/drivers/scpi/scpitest"
)

// Reply forms are the dialects' own (configs/instruments/*.yaml); numbers in
// NR1/NR2/NR3 per IEEE 488.2 and the SCPI overflow value 9.9E37 (SCPI-1999
// Vol. 1 §7.2.1, from memory).
func TestSupplyReads(t *testing.T) {
	tests := []struct {
		name  string
		d     dialect
		volt  bool // read_voltage instead of read_current
		step  ex
		want  float64
		unit  string
		check check
	}{
		{"sim NR3", simSupply, false, ex{Send: "MEAS:CURR?", Reply: "1.500000E+00"}, 1.5, "A", nil},
		{"sim negative NR2", simSupply, false, ex{Send: "MEAS:CURR?", Reply: "-0.25"}, -0.25, "A", nil},
		{"sim overflow", simSupply, false, ex{Send: "MEAS:CURR?", Reply: "9.9E37"}, 0, "", isOverrange},
		{"sim negative overflow", simSupply, false, ex{Send: "MEAS:CURR?", Reply: "-9.9E37"}, 0, "", isOverrange},
		{"sim garbled", simSupply, false, ex{Send: "MEAS:CURR?", Raw: []byte("1.5\x00\xff\n")}, 0, "", isParse("1.5\x00\xff")},
		{"sim timeout", simSupply, false, ex{Send: "MEAS:CURR?", Err: scpitest.Timeout}, 0, "", isTimeout},
		{"sim voltage", simSupply, true, ex{Send: "MEAS:VOLT?", Reply: "+3.2E+00"}, 3.2, "V", nil},
		{"slate amps", slateSupply, false, ex{Send: "READ:AMPS?", Reply: "+1.2500 A"}, 1.25, "A", nil},
		{"slate milliamps", slateSupply, false, ex{Send: "READ:AMPS?", Reply: "250.0mA"}, 0.25, "A", nil},
		{"slate wrong suffix", slateSupply, false, ex{Send: "READ:AMPS?", Reply: "1.25 V"}, 0, "", isParse("1.25 V")},
		{"slate no suffix", slateSupply, false, ex{Send: "READ:AMPS?", Reply: "1.25"}, 0, "", isParse("1.25")},
		{"slate overflow", slateSupply, false, ex{Send: "READ:AMPS?", Reply: "9.9E+37 A"}, 0, "", isOverrange},
		{"slate volts", slateSupply, true, ex{Send: "READ:VOLTS?", Reply: "-12.0 V"}, -12, "V", nil},
		{"slate volts out of valid range", slateSupply, true, ex{Send: "READ:VOLTS?", Reply: "70 V"}, 0, "", isRange},
		{"quill status,value", quillSupply, false, ex{Send: "I?", Reply: "0,1250.0"}, 1.25, "A", nil},
		{"quill one field", quillSupply, false, ex{Send: "I?", Reply: "0"}, 0, "", isParse("0")},
		{"quill overflow", quillSupply, false, ex{Send: "I?", Reply: "0,9.9E37"}, 0, "", isOverrange},
		{"quill garbled value", quillSupply, false, ex{Send: "I?", Reply: "0,12#4"}, 0, "", isParse("0,12#4")},
		{"quill volts", quillSupply, true, ex{Send: "U?", Reply: "0,-3200"}, -3.2, "V", nil},
		{"quill timeout", quillSupply, true, ex{Send: "U?", Err: scpitest.Timeout}, 0, "", isTimeout},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			s := newRig(t, tt.d, tt.step).supply(t)
			read := s.ReadCurrent
			if tt.volt {
				read = s.ReadVoltage
			}
			r, err := read(context.Background())
			checkReading(t, r, err, tt.want, tt.unit, tt.check)
		})
	}
}

func TestSupplySets(t *testing.T) {
	tests := []struct {
		name   string
		d      dialect
		do     func(*Supply) error
		steps  []ex
		check  check
		sleeps []time.Duration
	}{
		{"sim set current", simSupply, func(s *Supply) error { return s.SetCurrent(context.Background(), 2.5) },
			[]ex{{Send: "SOUR:CURR 2.500000E+00"}, simSupply.noErr}, noError, []time.Duration{4 * time.Millisecond}},
		{"sim set beyond range rejected, nothing sent", simSupply, func(s *Supply) error { return s.SetCurrent(context.Background(), 20.5) },
			nil, isRange, nil},
		{"sim set below range rejected", simSupply, func(s *Supply) error { return s.SetCurrent(context.Background(), -21) },
			nil, isRange, nil},
		{"sim error queue", simSupply, func(s *Supply) error { return s.SetCurrent(context.Background(), 5) },
			[]ex{{Send: "SOUR:CURR 5.000000E+00"}, {Send: "SYST:ERR?", Reply: simSupply.errEntry}, simSupply.noErr}, isInstrumentError(-222), nil},
		{"sim output on", simSupply, func(s *Supply) error { return s.SetOutput(context.Background(), true) },
			[]ex{{Send: "OUTP ON"}, simSupply.noErr}, noError, nil},
		{"sim garbled error queue", simSupply, func(s *Supply) error { return s.SetOutput(context.Background(), false) },
			[]ex{{Send: "OUTP OFF"}, {Send: "SYST:ERR?", Reply: "??"}}, isText("error queue"), nil},
		{"slate set current settles", slateSupply, func(s *Supply) error { return s.SetCurrent(context.Background(), -1.5) },
			[]ex{{Send: "OUT:AMPS -1.5000"}, slateSupply.noErr}, noError, []time.Duration{5 * time.Millisecond}},
		{"slate output off", slateSupply, func(s *Supply) error { return s.SetOutput(context.Background(), false) },
			[]ex{{Send: "OUT:STATE 0"}, slateSupply.noErr}, noError, nil},
		{"slate error queue", slateSupply, func(s *Supply) error { return s.SetCurrent(context.Background(), 39) },
			[]ex{{Send: "OUT:AMPS +39.0000"}, {Send: "ERR:NEXT?", Reply: slateSupply.errEntry}, slateSupply.noErr}, isInstrumentError(-222), nil},
		{"quill set current in mA", quillSupply, func(s *Supply) error { return s.SetCurrent(context.Background(), 1.25) },
			[]ex{{Send: "I=1250.0"}, quillSupply.noErr}, noError, nil},
		{"quill range", quillSupply, func(s *Supply) error { return s.SetCurrent(context.Background(), -10.5) },
			nil, isRange, nil},
		{"quill error queue", quillSupply, func(s *Supply) error { return s.SetOutput(context.Background(), true) },
			[]ex{{Send: "O=1"}, {Send: "E?", Reply: quillSupply.errEntry}, quillSupply.noErr}, isInstrumentError(-222), nil},
		{"quill set timeout in error queue", quillSupply, func(s *Supply) error { return s.SetOutput(context.Background(), true) },
			[]ex{{Send: "O=1"}, {Send: "E?", Err: scpitest.Timeout}}, isTimeout, nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := newRig(t, tt.d, tt.steps...)
			s := r.supply(t)
			tt.check(t, tt.do(s))
			if len(r.sleeps.d) != len(tt.sleeps) {
				t.Fatalf("waits %v, want %v", r.sleeps.d, tt.sleeps)
			}
			for i := range tt.sleeps {
				if r.sleeps.d[i] != tt.sleeps[i] {
					t.Fatalf("waits %v, want %v", r.sleeps.d, tt.sleeps)
				}
			}
		})
	}
}

func TestSupplyStatus(t *testing.T) {
	tests := []struct {
		name  string
		d     dialect
		step  ex
		comp  bool
		over  bool
		trip  bool
		outOn bool
	}{
		{"sim compliance+output", simSupply, ex{Send: "STAT:QUES:COND?", Reply: "9"}, true, false, false, true},
		{"sim overtemp", simSupply, ex{Send: "STAT:QUES:COND?", Reply: "+2"}, false, true, false, false},
		{"slate trip+compliance+output", slateSupply, ex{Send: "STATE:FLAGS?", Reply: "145"}, true, false, true, true},
		{"quill trip, no output bit", quillSupply, ex{Send: "S?", Reply: "4"}, false, false, true, false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			s := newRig(t, tt.d, tt.step).supply(t)
			st, err := s.Status(context.Background())
			if err != nil {
				t.Fatal(err)
			}
			if st.Compliance != tt.comp || st.OverTemp != tt.over || st.Tripped != tt.trip || st.OutputOn != tt.outOn {
				t.Fatalf("status %+v", st)
			}
		})
	}
	// A garbled register.
	s := newRig(t, simSupply, ex{Send: "STAT:QUES:COND?", Reply: "9.5"}).supply(t)
	if _, err := s.Status(context.Background()); err == nil {
		t.Fatal("a non-integer status register was accepted")
	}
}

func TestSupplyLimits(t *testing.T) {
	s := newRig(t, slateSupply).supply(t)
	l := s.Limits()
	if l.MaxCurrent != 40 || l.MaxVoltage != 65 || l.MaxSlew != 10 {
		t.Fatalf("limits %+v", l)
	}
}

// TestHaltPlan: the ramp never steps by more than slew·period and ends at
// exactly zero (the step bound is the definition of a slew limit).
func TestHaltPlan(t *testing.T) {
	tests := []struct {
		i0, slew float64
		period   time.Duration
		steps    int
	}{
		{2, 20, 20 * time.Millisecond, 5},
		{-2, 20, 20 * time.Millisecond, 5},
		{0.1, 20, 20 * time.Millisecond, 1},
		{10, 5, 100 * time.Millisecond, 20},
		{0, 5, 100 * time.Millisecond, 1},
	}
	for _, tt := range tests {
		plan := HaltPlan(tt.i0, tt.slew, tt.period)
		if len(plan) != tt.steps || plan[len(plan)-1] != 0 {
			t.Errorf("HaltPlan(%v) = %v, want %d steps ending at 0", tt.i0, plan, tt.steps)
			continue
		}
		prev := tt.i0
		for _, i := range plan {
			if d := prev - i; d*d > (tt.slew*tt.period.Seconds())*(tt.slew*tt.period.Seconds())*(1+1e-9) {
				t.Errorf("HaltPlan(%v): step %v → %v exceeds slew", tt.i0, prev, i)
			}
			prev = i
		}
	}
}

func TestSupplyHaltRamps(t *testing.T) {
	e := simSupply.noErr
	r := newRig(t, simSupply,
		ex{Send: "MEAS:CURR?", Reply: "2.0"},
		ex{Send: "SOUR:CURR 1.600000E+00"}, e,
		ex{Send: "SOUR:CURR 1.200000E+00"}, e,
		ex{Send: "SOUR:CURR 8.000000E-01"}, e,
		ex{Send: "SOUR:CURR 4.000000E-01"}, e,
		ex{Send: "SOUR:CURR 0.000000E+00"}, e,
		ex{Send: "MEAS:CURR?", Reply: "0.001"}, // already within 6 mA of zero: no wait
		ex{Send: "SOUR:CURR 0"}, e,
		ex{Send: "OUTP OFF"}, e,
	)
	s := r.supply(t)
	ctx, cancel := context.WithCancel(context.Background())
	cancel() // a cancelled caller must not stop the ramp-down
	if err := s.Halt(ctx); err != nil {
		t.Fatal(err)
	}
	// Between the 5 setpoints 4 halt periods; after each setting the
	// profile's 4 ms settle.
	if n := count(r.sleeps.d, 20*time.Millisecond); n != 4 || count(r.sleeps.d, 4*time.Millisecond) != 5 {
		t.Fatalf("waits %v, want 4 × 20ms between 5 settings of 4ms settle each", r.sleeps.d)
	}
}

// count is how many of ds equal d.
func count(ds []time.Duration, d time.Duration) int {
	n := 0
	for _, x := range ds {
		if x == d {
			n++
		}
	}
	return n
}

func TestSupplyHaltUsesLowerFixtureSlew(t *testing.T) {
	e := quillSupply.noErr
	r := newRig(t, quillSupply,
		ex{Send: "I=1000.0"}, e, // set 1 A
		ex{Send: "I?", Err: scpitest.Timeout}, // the read fails: ramp from the last setpoint
		quillSupply.sync(),                    // the line is brought back in step first
		ex{Send: "I=750.0"}, e,
		ex{Send: "I=500.0"}, e,
		ex{Send: "I=250.0"}, e,
		ex{Send: "I=0.0"}, e,
		ex{Send: "I?", Reply: "0,2.0"}, // 2 mA: zero
		ex{Send: "I=0"}, e, ex{Send: "O=0"}, e, ex{Send: "LCL"}, e,
	)
	r.opts.HaltSlew = 2.5 // A/s, below the profile's 5: 0.25 A per 100 ms step
	s := r.supply(t)
	if err := s.SetCurrent(context.Background(), 1); err != nil {
		t.Fatal(err)
	}
	err := s.Halt(context.Background())
	isTimeout(t, err) // the failed read is reported, the ramp still done
	if len(r.sleeps.d) != 3 {
		t.Fatalf("waits %v", r.sleeps.d)
	}
}

func TestSupplyHaltAfterIdentityLoss(t *testing.T) {
	r := newRig(t, simSupply,
		ex{Send: "MEAS:CURR?", Err: scpitest.Hangup},
		scpitest.Reconnect(),
		ex{Send: "*IDN?", Reply: "SOMEONE-ELSE,X"},
		ex{Send: "*IDN?", Reply: "SOMEONE-ELSE,X"},
		ex{Send: "*IDN?", Reply: "SOMEONE-ELSE,X"},
	)
	s := r.supply(t)
	_, err := s.ReadCurrent(context.Background())
	if !errors.Is(err, ErrIdentity) {
		t.Fatalf("got %v, want ErrIdentity after reconnecting to another instrument", err)
	}
	// Nothing more is sent to a different instrument.
	if err := s.SetCurrent(context.Background(), 1); !errors.Is(err, ErrIdentity) {
		t.Fatalf("got %v", err)
	}
	if err := s.Halt(context.Background()); !errors.Is(err, ErrIdentity) {
		t.Fatalf("got %v", err)
	}
}

func TestReconnectReportsAndRecovers(t *testing.T) {
	r := newRig(t, simSupply, append(append([]ex{
		{Send: "MEAS:CURR?", Err: scpitest.Hangup},
		scpitest.Reconnect()},
		simSupply.startup...),
		ex{Send: "MEAS:CURR?", Reply: "0.5"})...)
	s := r.supply(t)
	_, err := s.ReadCurrent(context.Background())
	var oe *OpError
	if !errors.As(err, &oe) || !oe.Reconnected || oe.Op != OpReadCurrent {
		t.Fatalf("got %v, want a reported read_current failure with the port reconnected", err)
	}
	rd, err := s.ReadCurrent(context.Background())
	if err != nil || rd.Value != 0.5 {
		t.Fatalf("after reconnect: %v, %v", rd, err)
	}
}

func TestIdentityChecked(t *testing.T) {
	p, _ := Load("sim-supply")
	wrong := ex{Send: "*IDN?", Reply: "HYSTD-SIM,FLUX-INTEGRATOR,0,1"}
	s := scpitest.New(t, "\n", "\n", wrong, wrong, wrong)
	_, err := NewSupply(context.Background(), p, s, Options{})
	if !errors.Is(err, ErrIdentity) {
		t.Fatalf("got %v, want ErrIdentity", err)
	}
	// The fixture may override the identity.
	s = scpitest.New(t, "\n", "\n", simSupply.startup...)
	if _, err := NewSupply(context.Background(), p, s, Options{Identity: "BIPOLAR"}); err != nil {
		t.Fatal(err)
	}
}

func TestUnsupportedOperation(t *testing.T) {
	p, _ := Load("sim-supply")
	delete(p.Operations, OpReadStatus)
	s := scpitest.New(t, "\n", "\n", simSupply.startup...)
	sup, err := NewSupply(context.Background(), p, s, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := sup.Status(context.Background()); !errors.Is(err, ErrUnsupported) {
		t.Fatalf("got %v", err)
	}
}

// After a reconnect whose identification timed out, the next operation
// identifies and initializes again before sending anything else.
func TestReidentifyBeforeNextOperation(t *testing.T) {
	r := newRig(t, simSupply, append(append([]ex{
		{Send: "MEAS:CURR?", Err: scpitest.Hangup},
		scpitest.Reconnect(),
		{Send: "*IDN?", Err: scpitest.Timeout}}, // not ready yet
		simSupply.startup...),
		ex{Send: "MEAS:CURR?", Reply: "0.5"})...)
	s := r.supply(t)
	_, err := s.ReadCurrent(context.Background())
	var oe *OpError
	if !errors.As(err, &oe) || oe.Reconnected || !errors.Is(err, link.ErrTimeout) {
		t.Fatalf("got %v, want the disconnect and the failed identification reported", err)
	}
	rd, err := s.ReadCurrent(context.Background())
	if err != nil || rd.Value != 0.5 {
		t.Fatalf("got %v, %v", rd, err)
	}
}

// A finite but absurd current reading must not make Halt plan billions of
// steps: it ramps from the range limit instead (slate: ±40 A, 10 A/s, 50 ms
// steps → 80 steps).
func TestSupplyHaltImplausibleReading(t *testing.T) {
	e := slateSupply.noErr
	steps := []ex{{Send: "READ:AMPS?", Reply: "9.8E+37 A"}}
	for k := 1; k <= 80; k++ {
		steps = append(steps, ex{Send: "OUT:AMPS " + fmt.Sprintf("%+.4f", 40*(1-float64(k)/80))}, e)
	}
	steps = append(steps, ex{Send: "READ:AMPS?", Reply: "+0.0020 A"},
		ex{Send: "OUT:AMPS 0"}, e, ex{Send: "OUT:STATE 0"}, e, ex{Send: "REMOTE:LOCK 0"}, e)
	r := newRig(t, slateSupply, steps...)
	if err := r.supply(t).Halt(context.Background()); err != nil {
		t.Fatal(err)
	}
}

// TestSupplyHaltWaitsForZero: after its last ramp setpoint Halt reads the
// current back every halt_period (20 ms) and sends the safe state only once
// it is within 6 mA of zero — the winding's
// current lags its setpoint by L/R (common practice: never switch a
// magnetizing winding's supply off while it still carries current). When the
// current does not fall within HaltSettle the safe state is still sent and
// the error says how much was left; a failed read-back is reported too.
// Threshold: 5 mA plus the sim-supply read_current offset of 1 mA.
func TestSupplyHaltWaitsForZero(t *testing.T) {
	e := simSupply.noErr
	ramp := []ex{{Send: "MEAS:CURR?", Reply: "0.4"}, {Send: "SOUR:CURR 0.000000E+00"}, e} // 0.4 A: one 20 ms step at 20 A/s
	safe := []ex{{Send: "SOUR:CURR 0"}, e, {Send: "OUTP OFF"}, e}
	read := func(a string) ex { return ex{Send: "MEAS:CURR?", Reply: a} }
	tests := []struct {
		name  string
		reads []ex
		waits int
		check check
	}{
		{"falls within three periods", []ex{read("0.17"), read("0.03"), read("0.004")}, 2, noError},
		{"falls exactly to the threshold", []ex{read("-0.006")}, 0, noError},
		{"never falls", []ex{read("0.2"), read("0.19"), read("0.18"), read("0.17"), read("0.16"), read("0.15")}, 5, isText("still read 0.15 A, beyond 0.006 A of zero")},
		{"read-back lost", []ex{read("0.2"), {Send: "MEAS:CURR?", Err: scpitest.Timeout}, simSupply.sync()}, 1, isText("reading the current back after the ramp")},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			steps := append(append(append([]ex{}, ramp...), tc.reads...), safe...)
			r := newRig(t, simSupply, steps...)
			r.opts.HaltSettle = 100 * time.Millisecond // 5 periods
			tc.check(t, r.supply(t).Halt(context.Background()))
			if count(r.sleeps.d, 20*time.Millisecond) != tc.waits {
				t.Fatalf("waits %v, want %d × 20ms (besides the setting's settle)", r.sleeps.d, tc.waits)
			}
		})
	}
}

// After a hang-up whose reconnect could not identify the line, the next
// operation's error names the lost and reconnected port: the first error,
// which did, may have reached nobody.
func TestUnidentifiedAfterReconnectSaysSo(t *testing.T) {
	r := newRig(t, simSupply,
		ex{Send: "MEAS:CURR?", Err: scpitest.Hangup},
		scpitest.Reconnect(),
		ex{Send: "*IDN?", Err: scpitest.Timeout},
		ex{Send: "*IDN?", Err: scpitest.Timeout},
	)
	s := r.supply(t)
	if _, err := s.ReadCurrent(context.Background()); err == nil {
		t.Fatal("the read that met the hang-up succeeded")
	}
	_, err := s.ReadCurrent(context.Background())
	if err == nil || !strings.Contains(err.Error(), "port was lost and reconnected") {
		t.Fatalf("got %v, want an error naming the lost and reconnected port", err)
	}
}

// vanishing is a scripted port that vanishes on demand: every read and
// write then fails as a disconnect and every reconnect waits for its
// context to end, as link.Conn's does while the device is absent. It
// records the time each reconnect was given.
type vanishing struct {
	*scpitest.Script
	gone   bool
	window []time.Duration
}

func (v *vanishing) Read(ctx context.Context, p []byte) (int, error) {
	if v.gone {
		return 0, scpitest.Hangup
	}
	return v.Script.Read(ctx, p)
}

func (v *vanishing) Write(ctx context.Context, p []byte) (int, error) {
	if v.gone {
		return 0, &link.Error{Op: "write", Port: "scripted", Kind: link.ErrDisconnected}
	}
	return v.Script.Write(ctx, p)
}

func (v *vanishing) Reconnect(ctx context.Context) error {
	dl, ok := ctx.Deadline()
	if !ok {
		dl = time.Now().Add(time.Hour)
	}
	v.window = append(v.window, time.Until(dl))
	<-ctx.Done()
	return &link.Error{Op: "reconnect", Port: "scripted", Kind: link.ErrDisconnected, Cause: ctx.Err()}
}

// TestVanishedPortReconnectedOnce: once a reconnect has failed (the device
// is gone), later operations fail at once instead of each waiting a
// reconnect window, and a Halt tries one reconnect more, within
// HaltReconnectWithin, whatever ReconnectWithin says: stopping on a bench
// whose ports vanished takes seconds (cmd/hystd TestOrphanedServeStops).
func TestVanishedPortReconnectedOnce(t *testing.T) {
	r := newRig(t, simSupply)
	r.opts.ReconnectWithin = time.Hour
	v := &vanishing{Script: r.script}
	s, err := NewSupply(context.Background(), r.prof, v, r.opts)
	if err != nil {
		t.Fatal(err)
	}
	v.gone = true
	ctx, cancel := context.WithTimeout(context.Background(), 50*time.Millisecond)
	_, err = s.ReadCurrent(ctx)
	cancel()
	if !errors.Is(err, link.ErrDisconnected) || len(v.window) != 1 {
		t.Fatalf("first read on the vanished port: %v after %d reconnects", err, len(v.window))
	}
	if _, err := s.ReadCurrent(context.Background()); !errors.Is(err, link.ErrDisconnected) || !strings.Contains(err.Error(), "not reconnected again") {
		t.Errorf("second read: %v", err)
	}
	if len(v.window) != 1 {
		t.Fatalf("the second read reconnected again (%d reconnects)", len(v.window))
	}
	if err := s.Halt(context.Background()); !errors.Is(err, link.ErrDisconnected) {
		t.Errorf("halt on the vanished port: %v", err)
	}
	if len(v.window) != 2 || v.window[1] > HaltReconnectWithin {
		t.Errorf("halt's reconnects: windows %v, want one more of at most %s", v.window, HaltReconnectWithin)
	}
}
