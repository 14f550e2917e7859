package sim

import (
	"context"
	"log/slog"
	"math"
	"testing"
	"time"

	"hystd/calib/units"
	"hystd/drivers/instr"
	"hystd/drivers/profile"
)

// crossings returns the mean magnitude of y where x crosses zero (linear
// interpolation), e.g. Br from (H, B) and Hc from (B, H).
func crossings(x, y []float64) float64 {
	sum, n := 0.0, 0
	for i := 1; i < len(x); i++ {
		if (x[i-1] > 0) != (x[i] > 0) && x[i] != x[i-1] {
			sum += math.Abs(y[i-1] + (y[i]-y[i-1])*(0-x[i-1])/(x[i]-x[i-1]))
			n++
		}
	}
	return sum / float64(n)
}

// TestLoopThroughDrivers records one B–H loop of the demo ring through the
// generic profile drivers (supply setpoints, current and flux readings
// over the ptys) and compares its Br and Hc with those of the bench's true
// loop. H comes from Ampère's law on the mean path (IEC 60404-4), B from
// ΔB = Δψ/(N2·A) (REFERENCE.md §1) plus the true B at the integrator reset.
func TestLoopThroughDrivers(t *testing.T) {
	ctx := context.Background()
	b, clk := startBench(t, quiet(t))
	o := profile.Options{Log: slog.New(slog.DiscardHandler),
		Sleep: func(ctx context.Context, d time.Duration) error { clk.Advance(d); return ctx.Err() }}
	open := func(role string) instr.Resource {
		r, err := profile.Open(ctx, profile.Spec{Port: b.Ports()[role], Profile: b.Profiles()[role]}, o)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { r.Close() })
		return r
	}
	sup := open(instr.RoleSupply).(instr.Supply)
	integ := open(instr.RoleIntegrator).(instr.Integrator)
	const iMax, di = 2.0, 0.02 // A; 20 A/s at one step per ms
	lm, area, n1, n2 := math.Pi*0.045, 50e-6, 200.0, 100.0
	if err := sup.SetOutput(ctx, true); err != nil {
		t.Fatal(err)
	}
	i := 0.0
	var hs, bs, th, tb []float64
	var b0 float64
	for cycle := 0; cycle < 3; cycle++ {
		for _, target := range []float64{iMax, -iMax, iMax} {
			for math.Abs(target-i) > 1e-9 {
				i += math.Copysign(math.Min(di, math.Abs(target-i)), target-i)
				if err := sup.SetCurrent(ctx, units.Ampere(i)); err != nil {
					t.Fatal(err)
				}
				clk.Advance(time.Millisecond)
				if cycle < 2 {
					continue
				}
				ri, err := sup.ReadCurrent(ctx)
				if err != nil {
					t.Fatal(err)
				}
				rf, err := integ.ReadFlux(ctx)
				if err != nil {
					t.Fatal(err)
				}
				tr := b.Truth()
				hs = append(hs, n1*ri.Value/lm)
				bs = append(bs, rf.Value/(n2*area)+b0)
				th, tb = append(th, float64(tr.H)), append(tb, float64(tr.B))
			}
			if cycle == 1 && target == iMax { // at the positive tip before the recorded cycle
				if err := integ.Reset(ctx); err != nil {
					t.Fatal(err)
				}
				b0 = float64(b.Truth().B)
			}
		}
	}
	if err := sup.Halt(ctx); err != nil {
		t.Fatal(err)
	}
	brM, hcM := crossings(hs, bs), crossings(bs, hs)
	brT, hcT := crossings(th, tb), crossings(tb, th)
	t.Logf("measured Br %.4f T Hc %.2f A/m; true Br %.4f T Hc %.2f A/m", brM, hcM, brT, hcT)
	if math.Abs(brM-brT) > 0.005*brT || math.Abs(hcM-hcT) > 0.005*hcT {
		t.Errorf("measured Br %g Hc %g, true Br %g Hc %g: more than 0.5 %% apart", brM, hcM, brT, hcT)
	}
	if hcT < 30 || hcT > 70 || brT < 0.4 || brT > 1.2 {
		t.Errorf("true loop Br %g T, Hc %g A/m: not a non-oriented steel loop", brT, hcT)
	}
}
