package engine_test

import (
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"hystd/acq/fixture/fixturetest"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/calib/units"
	"hystd/drivers/clock"
	"hystd/drivers/sim"
	"hystd/drivers/sim/physics"
)

func figure(t *testing.T, l record.Loop, name string) record.Figure {
	t.Helper()
	for _, f := range l.Figures {
		if f.Name == name {
			return f
		}
	}
	t.Fatalf("loop has no figure %s", name)
	return record.Figure{}
}

// runAtRate records one loop of ±500 A/m at rate (A/m/s) on a fresh bench
// with the given eddy-current parameters (nil: none) and returns HcB, Br
// and the 95th percentile of the sweep samples' time-stamp uncertainty.
func runAtRate(t *testing.T, eddy *physics.EddyParams, rate string) (hc, br record.Figure, tunc time.Duration) {
	t.Helper()
	cfg, err := sim.DefaultBench()
	if err != nil {
		t.Fatal(err)
	}
	cfg.RigParams.Specimen.Eddy = eddy
	ls, b := ringRun(t, cfg, strings.ReplaceAll(rateRecipe, "RATE", rate), nil)
	if tr := b.Truth(); math.Abs(float64(tr.I)) > 1e-3 || tr.Output {
		t.Errorf("bench left at %g A, output %v", float64(tr.I), tr.Output)
	}
	if len(ls) != 1 {
		t.Fatalf("%d loops", len(ls))
	}
	var us []time.Duration
	for _, smp := range ls[0].Raw {
		if smp.Phase == record.Sweep {
			us = append(us, smp.TUnc)
		}
	}
	slices.Sort(us)
	return figure(t, ls[0], "HcB"), figure(t, ls[0], "Br"), us[len(us)*95/100]
}

const rateRecipe = `kind: recipe
name: rate-check
steps:
  - condition: {amplitude: 500 A/m, cycles: 1, rate: RATE}
  - record_loop: {amplitude: 500 A/m, rate: RATE, sample_interval: 5ms, hold: 500ms}
`

// ringRun runs recipeText on a fresh ring bench of cfg in simulated time
// (the bench, the drivers and the engine on one clock.Sim) and returns the
// loops stored and the bench (closed when the test ends). clk, when not
// nil, is the simulated clock to use.
func ringRun(t *testing.T, cfg sim.Config, recipeText string, clk *clock.Sim) ([]record.Loop, *sim.Bench) {
	t.Helper()
	ls, b, err := ringRunErr(t, cfg, recipeText, clk)
	if err != nil {
		t.Fatal(err)
	}
	return ls, b
}

// ringRunErr is ringRun returning the run's error (a run that did not
// finish) instead of failing the test.
func ringRunErr(t *testing.T, cfg sim.Config, recipeText string, clk *clock.Sim) ([]record.Loop, *sim.Bench, error) {
	t.Helper()
	if clk == nil {
		clk = clock.NewSim(fixturetest.Epoch)
	}
	r := fixturetest.StartRing(t, cfg, clk)
	w, _, err := r.Run(t, recipeText)
	return w.Loops, r.Bench, err
}

// TestQuasiStatic is the usual quasi-static check (REFERENCE §2, from
// memory: halving the sweep rate must leave Hc and Br unchanged within
// their uncertainty) on the simulated bench, through the serial drivers:
// without eddy currents the two rates agree within the combined expanded
// uncertainty; with the classical eddy field of a solid 3 mm section
// (H_eddy = σ·d²/12 · dB/dt, σ = 2.2 MS/m) the coercivity at the faster
// rate is detectably larger.
func TestQuasiStatic(t *testing.T) {
	tests := []struct {
		name string
		eddy *physics.EddyParams
		same bool
	}{
		{"no eddy currents", nil, true},
		{"solid 3 mm section", &physics.EddyParams{ConductivitySM: 2.2e6, ThicknessMM: 3}, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			hcFast, brFast, uFast := runAtRate(t, tc.eddy, "1 kA/m/s")
			hcSlow, brSlow, uSlow := runAtRate(t, tc.eddy, "500 A/m/s")
			uHc := math.Hypot(hcFast.U, hcSlow.U)
			uBr := math.Hypot(brFast.U, brSlow.U)
			dHc, dBr := hcFast.Value-hcSlow.Value, brFast.Value-brSlow.Value
			t.Logf("time-stamp uncertainty p95 %s / %s", uFast, uSlow)
			t.Logf("HcB %.2f ± %.2f at 1 kA/m/s, %.2f ± %.2f at 500 A/m/s (Δ %.2f, U %.2f); Br %.4f ± %.4f, %.4f ± %.4f T (Δ %.4f, U %.4f)",
				hcFast.Value, hcFast.U, hcSlow.Value, hcSlow.U, dHc, uHc, brFast.Value, brFast.U, brSlow.Value, brSlow.U, dBr, uBr)
			if math.IsNaN(uHc) || math.IsNaN(uBr) || uHc <= 0 {
				t.Fatal("figures carry no uncertainty")
			}
			if tc.same {
				if math.Abs(dHc) > uHc || math.Abs(dBr) > uBr {
					t.Errorf("rate-dependent without eddy currents: ΔHc %.2f (U %.2f), ΔBr %.4f (U %.4f)", dHc, uHc, dBr, uBr)
				}
			} else if !(dHc > uHc) {
				t.Errorf("eddy currents not detected: ΔHc %.2f A/m within U %.2f", dHc, uHc)
			}
		})
	}
}

// TestMagnetOnYoke runs the 2nd-quadrant recipe in closed loop on the
// measured H on the simulated yoke (configs/bench-magnet.yaml: a
// Stoner–Wohlfarth hard-ferrite disc), where H is not known from the current
// in advance: the measured H must follow the setpoints, the curve and the
// recoil loop must be stored with their phases, and the winding must end at
// zero. (The figures of open curves need the absolute level of B at the
// start, which the processing takes from elsewhere; they are logged only.)
func TestMagnetOnYoke(t *testing.T) {
	y := fixturetest.StartYoke(t, 0)
	b := y.Bench
	// H = 0.9·N1·I/gap = 90 kA/m per A on this yoke: the gain is about 1/90000 A per A/m.
	w, run, err := y.Run(t, `kind: recipe
name: yoke-demag
control: field
field_gain_a_per_a_m: 1.1e-5
integrator_range_wb: 0.05   # N2·A_c·(μ0·H + J) ≈ 50 × 330 mm² × 1.9 T = 0.031 Wb-turns at saturation
period: 20ms
steps:
  - demag_curve: {saturate: 1.2 MA/m, to: -600 kA/m, rate: 400 kA/m/s, sample_interval: 20ms, hold: 500ms, recoil_at: [-300 kA/m]}
`)
	if err != nil {
		t.Fatalf("run %s: %v", run.State, err)
	}
	if tr := b.Truth(); math.Abs(float64(tr.I)) > 1e-3 || tr.Output {
		t.Errorf("bench left at %g A, output %v", float64(tr.I), tr.Output)
	}
	if len(w.Loops) != 2 || w.Loops[0].Kind != recipe.LoopKindDemag || w.Loops[1].Kind != recipe.LoopKindRecoil {
		t.Fatalf("loops %d", len(w.Loops))
	}
	// The closed loop kept the measured H on the setpoint during the sweep:
	// the probe is read while the current is being set, so a reading may lag
	// its setpoint by the time since the previous sample plus one period of
	// the 400 kA/m/s ramp; 2 kA/m more for the probe's noise and offset.
	raw := w.Loops[0].Raw
	for k := 1; k < len(raw); k++ {
		s := raw[k]
		if s.Phase != record.Sweep {
			continue
		}
		allowed := 400e3*(s.T-raw[k-1].T+20*time.Millisecond).Seconds() + 2e3
		if e := math.Abs(s.BProbe/units.Mu0 - s.Setpoint); e > allowed {
			t.Errorf("sample %d at %s: measured H %.0f A/m, setpoint %.0f A/m (allowed %.0f)", k, s.T, s.BProbe/units.Mu0, s.Setpoint, allowed)
		}
	}
	for _, f := range w.Loops[0].Figures {
		t.Logf("figure %s = %.4g ± %.2g %s", f.Name, f.Value, f.U, f.Unit)
	}
	// The recoil loop goes down the curve to −300 kA/m, up to 0 and back.
	rec := w.Loops[1].Raw
	lo, hiAfter := math.Inf(1), math.Inf(-1)
	for _, s := range rec {
		if s.Phase != record.Sweep {
			continue
		}
		h := s.BProbe / units.Mu0
		if h < lo {
			lo, hiAfter = h, math.Inf(-1)
		}
		hiAfter = math.Max(hiAfter, h)
	}
	if math.Abs(lo+300e3) > 16e3 || math.Abs(hiAfter) > 16e3 {
		t.Errorf("recoil loop spans %.0f A/m up to %.0f A/m, want −300 kA/m up to 0", lo, hiAfter)
	}
	if last := rec[len(rec)-1]; last.Phase != record.PostHold || math.Abs(last.BProbe/units.Mu0+300e3) > 16e3 {
		t.Errorf("recoil loop ends at %.0f A/m in phase %s", last.BProbe/units.Mu0, last.Phase)
	}
}
