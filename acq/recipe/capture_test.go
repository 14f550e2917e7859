package recipe

import (
	"strings"
	"testing"
	"time"
)

func TestCaptureKeys(t *testing.T) {
	const head = "kind: recipe\nname: c\nsteps:\n  - record_loop: {amplitude: 1 A, rate: 1 A/s, points: 100"
	for _, tc := range []struct{ keys, err string }{
		{", capture: sampled}", `steps.0.record_loop.capture: must be polled or buffered, got "sampled"`},
		{", buffer_period: 1ms}", "steps.0.record_loop.buffer_period: only with capture: buffered"},
		{", capture: buffered, buffer_period: 1us}", "steps.0.record_loop.buffer_period: must be 10µs to 1s, got 1µs"},
		{", sweep_mode: ramp}", "c.yaml:4: steps.0.record_loop.sweep_mode: ramp only with capture: buffered"},
		{", capture: buffered, sweep_mode: glide}", `c.yaml:4: steps.0.record_loop.sweep_mode: must be steps or ramp, got "glide"`},
	} {
		_, err := Parse("c.yaml", []byte(head+tc.keys+"\n"))
		if err == nil || !strings.Contains(err.Error(), tc.err) {
			t.Errorf("%s: got %v, want %q", tc.keys, err, tc.err)
		}
	}
	// 4 A of sweep at 1 A/s in 100 points: a setpoint every 40 ms, and by
	// default a buffered reading every 40 ms / 30.
	for _, tc := range []struct {
		keys string
		want Capture
	}{
		{"}", Capture{}},
		{", capture: polled}", Capture{}},
		{", capture: buffered}", Capture{Buffered: true, Period: 40 * time.Millisecond / DefaultBufferDivisor}},
		{", capture: buffered, buffer_period: 2ms}", Capture{Buffered: true, Period: 2 * time.Millisecond}},
		{", capture: buffered, sweep_mode: steps}", Capture{Buffered: true, Period: 40 * time.Millisecond / DefaultBufferDivisor}},
		{", capture: buffered, sweep_mode: ramp}", Capture{Buffered: true, Period: 40 * time.Millisecond / DefaultBufferDivisor, Ramp: true}},
	} {
		r, err := Parse("c.yaml", []byte(head+tc.keys+"\n"))
		if err != nil {
			t.Fatal(err)
		}
		fx, g := ringFixture(t)
		steps, err := Expand(r, fx, g)
		if err != nil {
			t.Fatal(err)
		}
		var got Capture
		for _, s := range steps {
			if s.Loop != nil {
				got = s.Capture
				if s.Period != 40*time.Millisecond {
					t.Fatalf("setpoint period %s, want 40ms", s.Period)
				}
			}
		}
		if got != tc.want {
			t.Errorf("%s: capture %+v, want %+v", tc.keys, got, tc.want)
		}
	}
}
