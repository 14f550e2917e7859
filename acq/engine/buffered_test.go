package engine

import (
	"context"
	"errors"
	"strings"
	"testing"
)

// capture: buffered asked of a fixture whose integrator's profile has no
// buffered section (the fakes have none) is refused before anything is
// energised or recorded, naming the step, the role and the profile; so is
// buffered capture in closed loop on H.
func TestBufferedRefusedAtCheck(t *testing.T) {
	tests := []struct{ name, head, step, want string }{
		{"profile without buffered", "", "  - record_loop: {amplitude: 1 A, rate: 1 A/s, points: 100, capture: buffered}\n",
			`the integrator's instrument profile "sim-integrator" has no buffered section`},
		{"closed loop", "control: field\n", "  - record_loop: {amplitude: 100 A/m, rate: 100 A/m/s, points: 100, capture: buffered}\n",
			"capture: buffered needs control: current"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := newRig(t)
			_, err := Run(context.Background(), r.setup(t, "kind: recipe\nname: b\n"+tc.head+"steps:\n"+tc.step))
			var ref *Refused
			if !errors.As(err, &ref) || !strings.Contains(err.Error(), tc.want) || !strings.Contains(err.Error(), "steps.0.record_loop") {
				t.Fatalf("error %v, want a refusal naming steps.0.record_loop and %q", err, tc.want)
			}
			if len(r.w.RunList()) != 0 || r.sup.Reads != 0 {
				t.Error("a refused recipe touched the store or the supply")
			}
		})
	}
	// The same recipe polled runs on the same fakes.
	r := newRig(t)
	if _, err := Prepare(context.Background(), r.setup(t, "kind: recipe\nname: b\nsteps:\n  - record_loop: {amplitude: 1 A, rate: 1 A/s, points: 100, capture: polled}\n")); err != nil {
		t.Fatalf("polled: %v", err)
	}
}

// sweep_mode: ramp asked of a supply whose profile has no ramp section
// (the fakes have none) is refused before anything is energised or
// recorded, naming the recipe's file and line, the step and the profile.
func TestRampRefusedAtCheck(t *testing.T) {
	r := newRig(t)
	_, err := Run(context.Background(), r.setup(t, "kind: recipe\nname: b\nsteps:\n  - record_loop: {amplitude: 1 A, rate: 1 A/s, points: 100,\n      capture: buffered, sweep_mode: ramp}\n"))
	var ref *Refused
	if !errors.As(err, &ref) || !strings.Contains(err.Error(), "sweep_mode: ramp, but the supply's instrument profile") ||
		!strings.Contains(err.Error(), ":4: steps.0.record_loop") {
		t.Fatalf("error %v, want a refusal naming line 4, steps.0.record_loop and the supply's profile", err)
	}
	t.Log(err)
	if len(r.w.RunList()) != 0 || r.sup.Reads != 0 {
		t.Error("a refused recipe touched the store or the supply")
	}
}
