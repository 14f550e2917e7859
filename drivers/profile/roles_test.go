package profile

import (
	"context"
	"testing"
	"time"

	"hystd/calib/units"
	"hystd/drivers/scpi/scpitest"
)

func TestIntegratorOps(t *testing.T) {
	ctx := context.Background()
	tests := []struct {
		name   string
		d      dialect
		steps  []ex
		do     func(*Integrator) error
		check  check
		sleeps int
	}{
		{"sim reset waits for *OPC?", simIntegrator,
			[]ex{{Send: "INT:RES"}, simIntegrator.noErr, {Send: "*OPC?", Reply: "1"}},
			func(n *Integrator) error { return n.Reset(ctx) }, noError, 0},
		{"sim range", simIntegrator,
			[]ex{{Send: "INT:RANG 1.000E-02"}, simIntegrator.noErr},
			func(n *Integrator) error { return n.SetRange(ctx, 0.01) }, noError, 0},
		{"sim range too large", simIntegrator, nil,
			func(n *Integrator) error { return n.SetRange(ctx, 2) }, isRange, 0},
		{"sim range error queue", simIntegrator,
			[]ex{{Send: "INT:RANG 1.000E-04"}, {Send: "SYST:ERR?", Reply: `-224,"Illegal parameter value"`}, simIntegrator.noErr},
			func(n *Integrator) error { return n.SetRange(ctx, 1e-4) }, isInstrumentError(-224), 0},
		{"quill reset polls busy", quillIntegrator,
			[]ex{{Send: "ZRO"}, quillIntegrator.noErr, {Send: "BSY?", Reply: "1"}, {Send: "BSY?", Reply: "1"}, {Send: "BSY?", Reply: "0"}},
			func(n *Integrator) error { return n.Reset(ctx) }, noError, 2},
		{"quill range code", quillIntegrator,
			[]ex{{Send: "RNG 3"}, quillIntegrator.noErr},
			func(n *Integrator) error { return n.SetRange(ctx, 0.01) }, noError, 0},
		{"quill range not a setting", quillIntegrator, nil,
			func(n *Integrator) error { return n.SetRange(ctx, 0.02) }, isText("0.0001, 0.001, 0.01, 0.1, 1"), 0},
		{"quill reset timeout", quillIntegrator,
			[]ex{{Send: "ZRO"}, quillIntegrator.noErr, {Send: "BSY?", Err: scpitest.Timeout}},
			func(n *Integrator) error { return n.Reset(ctx) }, isTimeout, 0},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := newRig(t, tt.d, tt.steps...)
			tt.check(t, tt.do(r.integrator(t)))
			if len(r.sleeps.d) != tt.sleeps {
				t.Fatalf("waits %v, want %d", r.sleeps.d, tt.sleeps)
			}
		})
	}
}

// A reset that never finishes ends after poll_timeout (2 s in 20 ms steps:
// 100 waits, counted on the injected sleeper, not on the wall clock).
func TestIntegratorPollTimeout(t *testing.T) {
	steps := []ex{{Send: "ZRO"}, quillIntegrator.noErr}
	for range 101 {
		steps = append(steps, ex{Send: "BSY?", Reply: "1"})
	}
	r := newRig(t, quillIntegrator, steps...)
	err := r.integrator(t).Reset(context.Background())
	isText("not done after 2s")(t, err)
	if len(r.sleeps.d) != 100 {
		t.Fatalf("%d waits, want 100", len(r.sleeps.d))
	}
}

func TestIntegratorReads(t *testing.T) {
	tests := []struct {
		name  string
		d     dialect
		step  ex
		want  float64
		check check
	}{
		{"sim flux", simIntegrator, ex{Send: "FETC:FLUX?", Reply: "-1.234000E-04"}, -1.234e-4, nil},
		{"sim NaN", simIntegrator, ex{Send: "FETC:FLUX?", Reply: "9.91E37"}, 0, isOverrange},
		{"sim overflow", simIntegrator, ex{Send: "FETC:FLUX?", Reply: "9.9E37"}, 0, isOverrange},
		{"sim garbled", simIntegrator, ex{Send: "FETC:FLUX?", Reply: "-1.2.3E-4"}, 0, isParse("-1.2.3E-4")},
		{"sim timeout", simIntegrator, ex{Send: "FETC:FLUX?", Err: scpitest.Timeout}, 0, isTimeout},
		{"quill µV·s", quillIntegrator, ex{Send: "F?", Reply: "0,-123.4"}, -1.234e-4, nil},
		{"quill overflow", quillIntegrator, ex{Send: "F?", Reply: "3,+9.9E37"}, 0, isOverrange},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			n := newRig(t, tt.d, tt.step).integrator(t)
			r, err := n.ReadFlux(context.Background())
			checkReading(t, r, err, tt.want, "Wb", tt.check)
		})
	}
}

func TestIntegratorOverload(t *testing.T) {
	tests := []struct {
		d     dialect
		step  ex
		want  bool
		check check
	}{
		{simIntegrator, ex{Send: "INT:OVER?", Reply: "1"}, true, noError},
		{simIntegrator, ex{Send: "INT:OVER?", Reply: "0"}, false, noError},
		{simIntegrator, ex{Send: "INT:OVER?", Reply: "ON"}, false, isParse("ON")}, // the map knows only 1 and 0
		{quillIntegrator, ex{Send: "OVL?", Reply: "ON"}, true, noError},
		{quillIntegrator, ex{Send: "OVL?", Reply: "maybe"}, false, isParse("maybe")},
	}
	for _, tt := range tests {
		n := newRig(t, tt.d, tt.step).integrator(t)
		got, err := n.Overloaded(context.Background())
		tt.check(t, err)
		if got != tt.want {
			t.Errorf("%s %q: got %v", tt.d.profile, tt.step.Reply, got)
		}
	}
}

func TestFieldMeter(t *testing.T) {
	ctx := context.Background()
	reads := []struct {
		name  string
		d     dialect
		step  ex
		want  float64
		check check
	}{
		{"sim tesla", simFieldMeter, ex{Send: "MEAS:FIEL?", Reply: "+5.000E-01"}, 0.5, nil},
		{"sim overflow", simFieldMeter, ex{Send: "MEAS:FIEL?", Reply: "9.9E37"}, 0, isOverrange},
		// 1 G = 1e-4 T (CGS definition; calib/units holds the same factor).
		{"slate gauss", slateFieldMeter, ex{Send: "PROBE:READ?", Reply: "1500 G"}, 0.15, nil},
		{"slate millitesla", slateFieldMeter, ex{Send: "PROBE:READ?", Reply: "-123.4 mT"}, -0.1234, nil},
		{"slate tesla", slateFieldMeter, ex{Send: "PROBE:READ?", Reply: "1.2T"}, 1.2, nil},
		{"slate beyond probe range", slateFieldMeter, ex{Send: "PROBE:READ?", Reply: "5 T"}, 0, isRange},
		{"slate unknown unit", slateFieldMeter, ex{Send: "PROBE:READ?", Reply: "5 kG"}, 0, isParse("5 kG")},
		{"slate timeout", slateFieldMeter, ex{Send: "PROBE:READ?", Err: scpitest.Timeout}, 0, isTimeout},
	}
	for _, tt := range reads {
		t.Run(tt.name, func(t *testing.T) {
			f := newRig(t, tt.d, tt.step).fieldMeter(t)
			r, err := f.ReadField(ctx)
			checkReading(t, r, err, tt.want, "T", tt.check)
		})
	}
	sets := []struct {
		name   string
		d      dialect
		steps  []ex
		do     func(*FieldMeter) error
		check  check
		sleeps []time.Duration
	}{
		{"sim range", simFieldMeter, []ex{{Send: "FIEL:RANG 3.000E-01"}, simFieldMeter.noErr},
			func(f *FieldMeter) error { return f.SetRange(ctx, units.Tesla(0.3)) }, noError, nil},
		{"sim range too small", simFieldMeter, nil,
			func(f *FieldMeter) error { return f.SetRange(ctx, 0.001) }, isRange, nil},
		{"sim zero", simFieldMeter, []ex{{Send: "FIEL:ZERO"}, simFieldMeter.noErr, {Send: "*OPC?", Reply: "1"}},
			func(f *FieldMeter) error { return f.Zero(ctx) }, noError, nil},
		{"slate span", slateFieldMeter, []ex{{Send: "PROBE:SPAN MID"}, slateFieldMeter.noErr},
			func(f *FieldMeter) error { return f.SetRange(ctx, 0.3) }, noError, nil},
		{"slate zero settles", slateFieldMeter, []ex{{Send: "PROBE:NULL"}, slateFieldMeter.noErr},
			func(f *FieldMeter) error { return f.Zero(ctx) }, noError, []time.Duration{200 * time.Millisecond}},
		{"slate zero refused", slateFieldMeter, []ex{{Send: "PROBE:NULL"}, {Send: "ERR:NEXT?", Reply: `-200,"field present"`}, slateFieldMeter.noErr},
			func(f *FieldMeter) error { return f.Zero(ctx) }, isInstrumentError(-200), nil},
	}
	for _, tt := range sets {
		t.Run(tt.name, func(t *testing.T) {
			r := newRig(t, tt.d, tt.steps...)
			tt.check(t, tt.do(r.fieldMeter(t)))
			if len(r.sleeps.d) != len(tt.sleeps) || (len(tt.sleeps) > 0 && r.sleeps.d[0] != tt.sleeps[0]) {
				t.Fatalf("waits %v, want %v", r.sleeps.d, tt.sleeps)
			}
		})
	}
}

func TestThermometer(t *testing.T) {
	tests := []struct {
		step  ex
		want  float64
		check check
	}{
		{ex{Send: "MEAS:TEMP?", Reply: "+23.50"}, 23.5, nil},
		{ex{Send: "MEAS:TEMP?", Reply: "9.9E37"}, 0, isOverrange},
		{ex{Send: "MEAS:TEMP?", Reply: "warm"}, 0, isParse("warm")},
	}
	for _, tt := range tests {
		th := newRig(t, simThermometer, tt.step).thermometer(t)
		r, err := th.ReadTemperature(context.Background())
		checkReading(t, r, err, tt.want, "°C", tt.check)
	}
}

// Halt of a non-supply sends its safe state (quill integrator: back to local).
func TestIntegratorHalt(t *testing.T) {
	n := newRig(t, quillIntegrator, ex{Send: "LCL"}, quillIntegrator.noErr).integrator(t)
	if err := n.Halt(context.Background()); err != nil {
		t.Fatal(err)
	}
}
