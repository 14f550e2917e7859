package sampler

import (
	"context"
	"log/slog"
	"math"
	"sync/atomic"
	"testing"
	"time"

	"hystd/configs"
	"hystd/drivers/instr"
	"hystd/drivers/profile"
	"hystd/drivers/sim"
)

// simRoles starts the simulated bench (real clock, its own ptys) and opens
// the supply, integrator and field meter with their sim-* profiles, the
// supply held at 2 A with its output on.
func simRoles(t *testing.T) (*sim.Bench, Roles) {
	t.Helper()
	cfg, err := sim.DefaultBench()
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	b, err := sim.Start(ctx, cfg)
	if err != nil {
		t.Skipf("no simulated bench: %v", err)
	}
	t.Cleanup(func() { b.Close() })
	o := profile.Options{Log: slog.New(slog.DiscardHandler)}
	ports := b.Ports()
	sup, err := profile.OpenSupply(ctx, profile.Spec{Port: ports[instr.RoleSupply], Profile: "sim-supply"}, o)
	if err != nil {
		t.Fatal(err)
	}
	integ, err := profile.OpenIntegrator(ctx, profile.Spec{Port: ports[instr.RoleIntegrator], Profile: "sim-integrator"}, o)
	if err != nil {
		t.Fatal(err)
	}
	fm, err := profile.OpenFieldMeter(ctx, profile.Spec{Port: ports[instr.RoleFieldMeter], Profile: "sim-fieldmeter"}, o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { sup.Close(); integ.Close(); fm.Close() })
	if err := sup.SetCurrent(ctx, 2); err != nil {
		t.Fatal(err)
	}
	if err := sup.SetOutput(ctx, true); err != nil {
		t.Fatal(err)
	}
	return b, Roles{Supply: sup, Integrator: integ, FieldMeter: fm}
}

// The supply's two reads (current, voltage) go out as one group of queued
// queries (sim-supply: queued_queries 2), and a group is used only whole.
// With the supply held at 2 A into the 0.8 Ω winding of the demo bench
// (V = R·I differs from I, so a reply taken for the other read shows), a
// fault on the first reply of the pair (lost: the voltage's reply comes
// first; held past the 500 ms timeout; a character spoiled; an error put
// in the instrument's queue) never puts a current in the voltage channel
// or a voltage in the current channel: every sample's I is the bench's
// true current and its V the true terminal voltage, R·I (the supply's
// readback is exact in the simulation), and each fault that spoils a reply is read again.
func TestQueuedPairFaults(t *testing.T) {
	b, roles := simRoles(t)
	if q, ok := roles.Supply.(instr.Queued); !ok || q.Queued() != 2 {
		t.Fatalf("sim-supply does not queue its two reads: %T", roles.Supply)
	}
	s, err := New(roles, time.Now())
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	var retries atomic.Int64
	ctx, cancel := context.WithTimeout(WithRetryCounter(context.Background(), &retries), 60*time.Second)
	defer cancel()
	check := func(what string, k int, got Reading) {
		t.Helper()
		tr := b.Truth()
		i, v := float64(tr.I), float64(tr.V)
		if math.Abs(got.Sample.I-i) > 1e-5 || math.Abs(got.Sample.V-v) > 1e-5 || math.Abs(v-i*tr.Resistance) > 1e-5 {
			t.Fatalf("%s, sample %d: I = %g A, V = %g V; truth I = %g A, V = %g V, R·I = %g V", what, k, got.Sample.I, got.Sample.V, i, v, i*tr.Resistance)
		}
	}
	// Settle at 2 A (100 A/s slew; then V = R·I, the winding's L·dI/dt
	// gone) before the faults.
	for k := 0; ; k++ {
		got, err := s.ReadAll(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if r := b.Truth().Resistance; math.Abs(got.Sample.I-2) < 1e-6 && math.Abs(got.Sample.V-2*r) < 1e-6 {
			check("settled", k, got)
			break
		}
		if k > 1000 {
			t.Fatalf("the supply never reached 2 A: %+v", got.Sample)
		}
	}
	for _, c := range []struct {
		f       sim.Fault
		reReads bool
	}{
		{sim.Fault{Role: instr.RoleSupply, Kind: sim.FaultDrop}, true},
		{sim.Fault{Role: instr.RoleSupply, Kind: sim.FaultDelay, Delay: configs.Duration(800 * time.Millisecond)}, true},
		{sim.Fault{Role: instr.RoleSupply, Kind: sim.FaultGarble}, true},
		{sim.Fault{Role: instr.RoleSupply, Kind: sim.FaultError, Code: -300, Message: "Device-specific error"}, false},
	} {
		before, fired := retries.Load(), b.Injected()[c.f.Kind]
		if err := b.Inject(c.f); err != nil {
			t.Fatal(err)
		}
		for k := range 5 {
			got, err := s.ReadAll(ctx)
			if err != nil {
				t.Fatalf("%s: %v", c.f.Kind, err)
			}
			check(c.f.Kind, k, got)
		}
		if n := b.Injected()[c.f.Kind]; n != fired+1 {
			t.Fatalf("%s: fired %d times, want once", c.f.Kind, n-fired)
		}
		if re := retries.Load() - before; (re > 0) != c.reReads {
			t.Errorf("%s: %d re-reads", c.f.Kind, re)
		}
	}
}
