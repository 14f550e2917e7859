package sim

import (
	"context"
	"math"
	"testing"
	"time"

	"hystd/drivers/instr"
)

// The simulated supply, given a ramp rate through its profile's ramp
// section, moves its current to each new setpoint at that rate on its own
// clock (60 ppm fast: rate·(1 + 60e-6) A per bench second) instead of at
// its 100 A/s slew limit, stops at the setpoint, and returns to plain
// setpoints with ramp.off. Checked against the bench's own truth (the
// physics' current every 1 ms step), not through the supply's read-back.
func TestSupplyRampsAtProgrammedRate(t *testing.T) {
	ctx := context.Background()
	b, clk, sup, _ := openBuffered(t, instr.RoleIntegrator)
	r, ok := sup.(instr.Ramper)
	if !ok || !r.CanRamp() {
		t.Fatal("sim-supply: want a ramp section")
	}
	if err := sup.SetOutput(ctx, true); err != nil {
		t.Fatal(err)
	}
	const rate = 0.8 // A/s
	if err := r.SetRampRate(ctx, rate); err != nil {
		t.Fatal(err)
	}
	if err := sup.SetCurrent(ctx, 1.2); err != nil {
		t.Fatal(err)
	}
	t0 := b.Truth()
	clk.Advance(time.Second)
	t1 := b.Truth()
	got := float64(t1.I-t0.I) / (t1.T - t0.T).Seconds()
	want := rate * (1 + 60e-6)
	t.Logf("ramp: %.9f A/s over %s (programmed %g A/s, supply clock +60 ppm)", got, t1.T-t0.T, rate)
	// One physics step (1 ms) of the 100 A/s slew limit would be 0.1 A:
	// the bound is 1e-6 of the rate.
	if math.Abs(got-want) > 1e-6*rate {
		t.Fatalf("current rose at %.9f A/s, want %.9f", got, want)
	}
	clk.Advance(time.Second) // the setpoint is reached at 1.5 s and held
	if tr := b.Truth(); math.Abs(float64(tr.I)-1.2) > 1e-9 {
		t.Fatalf("after 2 s: %g A, want the setpoint 1.2 A held", float64(tr.I))
	}
	// ramp.off: the next setpoint applies at the slew limit (0.2 A in 2 ms).
	if err := r.RampOff(ctx); err != nil {
		t.Fatal(err)
	}
	if err := sup.SetCurrent(ctx, 1.0); err != nil {
		t.Fatal(err)
	}
	clk.Advance(10 * time.Millisecond)
	if tr := b.Truth(); math.Abs(float64(tr.I)-1.0) > 1e-9 {
		t.Fatalf("10 ms after ramp off and a setpoint of 1 A: %g A", float64(tr.I))
	}
}
