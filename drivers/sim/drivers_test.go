package sim

import (
	"bytes"
	"context"
	"errors"
	"hystd/drivers/clock"
	"log/slog"
	"math"
	"os"
	"testing"
	"time"

	"hystd/drivers/instr"
	"hystd/drivers/link"
	"hystd/drivers/profile"
)

// benchWith is the demo bench (without noise) serving role with profile name.
func benchWith(t *testing.T, role, name string) Config {
	t.Helper()
	data, err := os.ReadFile("../../configs/bench-demo.yaml")
	if err != nil {
		t.Fatal(err)
	}
	old := map[string]string{instr.RoleSupply: "supply:      {profile: sim-supply}", instr.RoleIntegrator: "integrator:  {profile: sim-integrator}",
		instr.RoleFieldMeter: "field_meter: {profile: sim-fieldmeter}", instr.RoleThermometer: "thermometer: {profile: sim-thermometer}"}[role]
	data = bytes.Replace(data, []byte(old), []byte(role+": {profile: "+name+"}"), 1)
	c, err := ParseBench("bench-"+name+".yaml", data)
	if err != nil {
		t.Fatal(err)
	}
	return withoutNoise(c)
}

// TestShippedProfilesThroughDrivers serves every shipped instrument profile
// and drives it with the project's generic profile drivers
// (drivers/profile over drivers/scpi and drivers/link): what the drivers
// read must be the bench's truth, and the supply's Halt must leave it at
// zero current with the output off. The drivers' sleeps advance the bench
// clock, so settle times and halt ramps take no wall time.
func TestShippedProfilesThroughDrivers(t *testing.T) {
	ctx := context.Background()
	for _, name := range profile.Names() {
		p, err := profile.Load(name)
		if err != nil {
			t.Fatal(err)
		}
		t.Run(name, func(t *testing.T) {
			b, clk := startBench(t, benchWith(t, p.Role, name))
			o := profile.Options{Log: slog.New(slog.DiscardHandler),
				Sleep: func(ctx context.Context, d time.Duration) error { clk.Advance(d); return ctx.Err() }}
			// Read timeouts stay in real time while the bench's clock is
			// manual: after an Advance the bench integrates that much
			// physics before it answers, which under the race detector on a
			// loaded machine can outlast the profile's 500 ms.
			p.Timeout = "5s"
			r, err := profile.OpenProfile(ctx, p, profile.Spec{Port: b.Ports()[p.Role], Profile: name}, o)
			if err != nil {
				t.Fatal(err)
			}
			defer r.Close()
			switch d := r.(type) {
			case instr.Supply:
				if err := d.SetOutput(ctx, true); err != nil {
					t.Fatal(err)
				}
				if err := d.SetCurrent(ctx, 1.25); err != nil {
					t.Fatal(err)
				}
				clk.Advance(time.Second)
				rd, err := d.ReadCurrent(ctx)
				if err != nil || math.Abs(rd.Value-float64(b.Truth().I)) > 1e-5 || math.Abs(rd.Value-1.25) > 1e-5 {
					t.Errorf("read current %v (%v), truth %g", rd.Value, err, b.Truth().I)
				}
				st, err := d.Status(ctx)
				if err != nil || st.Tripped || st.Compliance {
					t.Errorf("status %+v, %v", st, err)
				}
				if err := d.SetCurrent(ctx, 1e3); err == nil {
					t.Error("1 kA accepted")
				}
				if err := d.Halt(ctx); err != nil {
					t.Fatal(err)
				}
				clk.Advance(time.Second)
				if tr := b.Truth(); tr.I != 0 || tr.Output {
					t.Errorf("after Halt: I = %g A, output %v", tr.I, tr.Output)
				}
			case instr.Integrator:
				if err := d.SetRange(ctx, 0.01); err != nil {
					t.Fatal(err)
				}
				if err := d.Reset(ctx); err != nil {
					t.Fatal(err)
				}
				rd, err := d.ReadFlux(ctx) // at the bench instant of the reset
				if err != nil || math.Abs(rd.Value) > 1e-9 {
					t.Errorf("flux %v, %v", rd.Value, err)
				}
				clk.Advance(10 * time.Second) // drift: V_os·t (REFERENCE.md §5)
				rd, err = d.ReadFlux(ctx)
				if want := b.Config().Integrator.OffsetV * 10; err != nil || math.Abs(rd.Value-want) > 1e-3*want+1e-9 {
					t.Errorf("flux after 10 s = %v (%v), want offset drift %g", rd.Value, err, want)
				}
				if ov, err := d.Overloaded(ctx); err != nil || ov {
					t.Errorf("overloaded %v, %v", ov, err)
				}
			case instr.FieldMeter:
				if err := d.SetRange(ctx, 0.3); err != nil {
					t.Fatal(err)
				}
				if err := d.Zero(ctx); err != nil {
					t.Fatal(err)
				}
				rd, err := d.ReadField(ctx)
				if err != nil || math.Abs(rd.Value) > 1e-9 {
					t.Errorf("field after zero at H = 0: %v, %v", rd.Value, err)
				}
			case instr.Thermometer:
				rd, err := d.ReadTemperature(ctx)
				if err != nil || math.Abs(rd.Value-float64(b.Truth().Temp)) > 1e-4 {
					t.Errorf("temperature %v (%v), truth %g", rd.Value, err, b.Truth().Temp)
				}
			default:
				t.Fatalf("unexpected %T", r)
			}
		})
	}
}

// TestFaultsThroughProfileDrivers: injected faults reach the generic
// profile drivers as their typed errors.
func TestFaultsThroughProfileDrivers(t *testing.T) {
	ctx := context.Background()
	open := func(t *testing.T, b *Bench, clk *clock.Manual, role string) instr.Resource {
		o := profile.Options{Log: slog.New(slog.DiscardHandler), ReconnectWithin: 2 * time.Second,
			Sleep: func(ctx context.Context, d time.Duration) error { clk.Advance(d); return ctx.Err() }}
		r, err := profile.Open(ctx, profile.Spec{Port: b.Ports()[role], Profile: b.Profiles()[role]}, o)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { r.Close() })
		return r
	}
	t.Run("overrange reading", func(t *testing.T) {
		b, clk := startBench(t, quiet(t))
		fm := open(t, b, clk, instr.RoleFieldMeter).(instr.FieldMeter)
		sup := open(t, b, clk, instr.RoleSupply).(instr.Supply)
		if err := fm.SetRange(ctx, 0.01); err != nil {
			t.Fatal(err)
		}
		sup.SetOutput(ctx, true)
		sup.SetCurrent(ctx, 10) // μ0·N1·I/l_m = 17.8 mT > 10 mT range
		clk.Advance(time.Second)
		if _, err := fm.ReadField(ctx); !errors.Is(err, profile.ErrOverrange) {
			t.Errorf("err = %v, want profile.ErrOverrange", err)
		}
		if err := sup.Halt(ctx); err != nil {
			t.Error(err)
		}
	})
	t.Run("dropped reply", func(t *testing.T) {
		// Command 1 is *IDN?, 2 the error-queue read before init, 3 the init
		// *CLS with its error-queue read: the 5th line is the first reading.
		b, clk := startBench(t, faultBench(t, "  - {role: thermometer, kind: drop, after_commands: 5}\n"))
		th := open(t, b, clk, instr.RoleThermometer).(instr.Thermometer)
		_, err := th.ReadTemperature(ctx)
		var oe *profile.OpError
		if !errors.Is(err, link.ErrTimeout) || !errors.As(err, &oe) {
			t.Fatalf("err = %v, want *profile.OpError wrapping link.ErrTimeout", err)
		}
		if _, err := th.ReadTemperature(ctx); err != nil {
			t.Errorf("next reading: %v", err)
		}
	})
	t.Run("trip", func(t *testing.T) {
		b, clk := startBench(t, faultBench(t, "  - {role: supply, kind: trip, at: 2s}\n"))
		sup := open(t, b, clk, instr.RoleSupply).(instr.Supply)
		sup.SetOutput(ctx, true)
		if err := sup.SetCurrent(ctx, 2); err != nil {
			t.Fatal(err)
		}
		clk.Advance(3 * time.Second)
		st, err := sup.Status(ctx)
		if err != nil || !st.Tripped || st.OutputOn {
			t.Errorf("status %+v (%v), want tripped, output off", st, err)
		}
		if tr := b.Truth(); tr.I != 0 {
			t.Errorf("tripped supply drives %g A", tr.I)
		}
		if err := sup.Halt(ctx); err != nil {
			t.Errorf("halt after trip: %v", err)
		}
	})
}
