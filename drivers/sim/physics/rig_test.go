package physics

import (
	"math"
	"strings"
	"testing"

	"hystd/calib/units"
)

// TestGeometry checks the ring and Epstein geometry against REFERENCE.md
// check values 4, 6 and 7 (IEC 60205 closed form for the ring; IEC 60404-2
// A = m/(4·l·ρ) and the conventional l_m = 0.94 m for the Epstein square).
func TestGeometry(t *testing.T) {
	for _, c := range []struct {
		name     string
		g        Geometry
		lm, area float64 // m, m²
		tol      float64
	}{
		{"ring 50/40/10 effective (check 4)", Geometry{Shape: "ring", Ring: &RingGeom{OuterDiameterMM: 50, InnerDiameterMM: 40, HeightMM: 10, Path: "effective"}}, 140.21e-3, 49.793e-6, 1e-4},
		{"ring 56/40/10 effective (check 6)", Geometry{Shape: "ring", Ring: &RingGeom{OuterDiameterMM: 56, InnerDiameterMM: 40, HeightMM: 10, Path: "effective"}}, 147.99e-3, 79.25e-6, 1e-4},
		{"ring 50/40/10 mean (IEC 60404-4)", Geometry{Shape: "ring", Ring: &RingGeom{OuterDiameterMM: 50, InnerDiameterMM: 40, HeightMM: 10}}, math.Pi * 45e-3, 50e-6, 1e-12},
		{"epstein 1 kg (check 7)", Geometry{Shape: "epstein", Epstein: &EpsteinGeom{MassKG: 1, StripLengthMM: 300, DensityKGM3: 7650}}, 0.94, 108.93e-6, 1e-4},
		{"yoke", Geometry{Shape: "yoke", Yoke: &YokeGeom{GapMM: 10, AreaMM2: 100, Efficiency: 0.5}}, 20e-3, 100e-6, 1e-12},
	} {
		lm, a, err := c.g.Resolve()
		if err != nil {
			t.Errorf("%s: %v", c.name, err)
			continue
		}
		if relErr(lm, c.lm) > c.tol || relErr(a, c.area) > c.tol {
			t.Errorf("%s: l_m = %.6g m, A = %.6g m², want %.6g, %.6g", c.name, lm, a, c.lm, c.area)
		}
	}
	// Check value 7 continued: N1 = 700, I = 1 A on l_m 0.94 m → H = 744.68 A/m.
	if h := 700 * 1.0 / 0.94; math.Abs(h-744.68) > 0.01 {
		t.Errorf("Epstein H = %.2f", h)
	}
	for _, bad := range []Geometry{
		{Shape: "ring"},
		{Shape: "ring", Ring: &RingGeom{OuterDiameterMM: 40, InnerDiameterMM: 50, HeightMM: 10}},
		{Shape: "ring", Ring: &RingGeom{OuterDiameterMM: 50, InnerDiameterMM: 40, HeightMM: 10, Path: "long"}},
		{Shape: "epstein", Epstein: &EpsteinGeom{MassKG: 1}},
		{Shape: "yoke", Yoke: &YokeGeom{GapMM: 1, AreaMM2: 1, Efficiency: 2}},
		{Shape: "cube"},
	} {
		if _, _, err := bad.Resolve(); err == nil {
			t.Errorf("%+v accepted", bad)
		}
	}
}

func testRig(t *testing.T) *Rig {
	t.Helper()
	r, err := NewRig(testParams())
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func testParams() RigParams {
	return RigParams{
		Winding: WindingParams{N1: 200, N2: 100, ResistanceOhm: 0.8, InductanceH: 0.05,
			HeatCapacityJPerK: 100, ThermalResistanceKW: 2, AmbientC: 20},
		Supply: SupplyParams{MaxCurrentA: 20, ComplianceV: 30, SlewAPerS: 50, OverTempC: 70, TripC: 90},
		Specimen: SpecimenParams{Model: "jiles-atherton",
			Geometry:      Geometry{Shape: "ring", Ring: &RingGeom{OuterDiameterMM: 50, InnerDiameterMM: 40, HeightMM: 10}},
			JilesAtherton: &JAParams{Ms: 1.6e6, A: 1100, K: 400, C: 0.2, Alpha: 1.6e-3}},
		Integrator: IntegratorParams{RangeWb: 1},
		FieldMeter: FieldMeterParams{RangeT: 3},
	}
}

func run(r *Rig, seconds, dt float64) {
	for n := int(math.Round(seconds / dt)); n > 0; n-- {
		r.Step(dt)
	}
}

// TestSupplySlewAndSettle: the current ramps at the slew limit (well inside
// compliance: L·slew + R·I = 2.5 V + 8 V < 30 V) and then holds the setpoint.
func TestSupplySlewAndSettle(t *testing.T) {
	r := testRig(t)
	r.Supply.Output = true
	r.Supply.Setpoint = 10
	run(r, 0.1, 1e-3)
	if i := r.Supply.I; math.Abs(i-5) > 1e-9 {
		t.Errorf("after 0.1 s at 50 A/s: I = %g A, want 5", i)
	}
	if r.Supply.Compliance {
		t.Error("compliance flagged inside the limit")
	}
	run(r, 0.2, 1e-3)
	if math.Abs(r.Supply.I-10) > 1e-9 {
		t.Errorf("I = %g, want 10", r.Supply.I)
	}
	// Ampère's law on the mean path: H = N1·I/(π·(D+d)/2) = 2000/0.14137 A/m.
	if h := r.State().H; math.Abs(h-2000/(math.Pi*45e-3)) > 1e-6 {
		t.Errorf("H = %g", h)
	}
	r.Supply.Output = false
	run(r, 0.3, 1e-3)
	if r.Supply.I != 0 {
		t.Errorf("output off: I = %g, want 0", r.Supply.I)
	}
}

// TestSupplyCompliance: with 2 V compliance into 0.8 Ω the current cannot
// pass 2.5 A; on the way it rises as the L–R step response toward V/R.
func TestSupplyCompliance(t *testing.T) {
	p := testParams()
	p.Supply.ComplianceV = 2
	r, err := NewRig(p)
	if err != nil {
		t.Fatal(err)
	}
	r.Supply.Output = true
	r.Supply.Setpoint = 10
	run(r, 0.05, 1e-4)
	if !r.Supply.Compliance {
		t.Fatal("compliance not flagged")
	}
	// τ = L/R = 62.5 ms; I(t) = (V/R)·(1 − e^{−t/τ}) (first-order circuit).
	want := 2.5 * (1 - math.Exp(-0.05/0.0625))
	if relErr(r.Supply.I, want) > 0.01 {
		t.Errorf("I(50 ms) = %g, want %g (first-order step response)", r.Supply.I, want)
	}
	run(r, 2, 1e-3)
	if math.Abs(r.Supply.I-2.5) > 0.01 {
		t.Errorf("I = %g, want ≈ 2.5 = V/R", r.Supply.I)
	}
}

// TestWindingHeatingAndTrip: at 10 A the winding heats; its resistance
// follows copper's +0.39 %/K (common practice); at trip_c the supply trips
// and the current returns to zero.
func TestWindingHeatingAndTrip(t *testing.T) {
	r := testRig(t)
	r.Supply.Output = true
	r.Supply.Setpoint = 10
	tripped, tripTemp := -1.0, 0.0
	for i := 0; i < 600000 && tripped < 0; i++ {
		r.Step(1e-3)
		if r.Supply.Tripped {
			tripped, tripTemp = r.Time(), r.Supply.TempC
		}
	}
	if tripped < 0 {
		t.Fatalf("no trip; T = %g °C", r.Supply.TempC)
	}
	if got, want := r.Supply.Resistance(), 0.8*(1+0.0039*(r.Supply.TempC-20)); relErr(got, want) > 1e-12 {
		t.Errorf("R = %g, want %g", got, want)
	}
	if !r.Supply.OverTemp || r.Supply.Output {
		t.Error("after trip: want overtemp set and output off")
	}
	run(r, 1, 1e-3)
	if r.Supply.I != 0 {
		t.Errorf("tripped supply still drives %g A", r.Supply.I)
	}
	if r.Supply.ClearTrip() {
		t.Error("trip cleared while still hot")
	}
	if tripTemp < 90 || tripTemp > 90.01 {
		t.Errorf("tripped at %g °C, want just past trip_c 90 °C", tripTemp)
	}
}

// TestIntegratorDriftAndAirFlux uses REFERENCE.md check value 9 (V_os 10 µV
// for 60 s, N2 = 100, A = 50 mm² → ΔB = 0.120 T; Arpaia et al. 2022) and check
// value 11 (A_c 60 mm², A 50 mm², H 10 kA/m → air flux 2.513 mT;
// textbook / IEC 60404-4).
func TestIntegratorDriftAndAirFlux(t *testing.T) {
	g := NewIntegrator(IntegratorParams{OffsetV: 10e-6, RangeWb: 1}, 0, 0)
	dB := g.Read(0, 60, 0) / (100 * 50e-6)
	if math.Abs(dB-0.120) > 1e-9 {
		t.Errorf("drift ΔB = %g T, want 0.120", dB)
	}
	// Air flux through a coil of 60 mm² around a 50 mm² specimen.
	p := testParams()
	p.Winding.CoilAreaMM2 = 60
	p.Specimen.Geometry = Geometry{Shape: "ring", Ring: &RingGeom{OuterDiameterMM: 50, InnerDiameterMM: 40, HeightMM: 10}}
	r, err := NewRig(p)
	if err != nil {
		t.Fatal(err)
	}
	r.Supply.Output = true
	r.Supply.Setpoint = 10e3 * r.PathLength() / 200 // H = 10 kA/m
	run(r, 1, 1e-3)
	s := r.State()
	if math.Abs(s.H-1e4) > 1e-6 {
		t.Fatalf("H = %g", s.H)
	}
	air := s.Psi/(100*50e-6) - s.B
	if math.Abs(air-2.513e-3) > 0.0005e-3 {
		t.Errorf("air flux = %g T, want 2.513 mT", air)
	}
	if math.Abs(air-units.Mu0*1e4*10e-6/50e-6) > 1e-12 {
		t.Errorf("air flux = %g T, not μ0·H·(A_c−A)/A", air)
	}
}

func TestIntegratorRangeGainReset(t *testing.T) {
	g := NewIntegrator(IntegratorParams{GainError: 0.01, RangeWb: 1e-3}, 0, 0)
	if v := g.Read(5e-4, 0, 0); math.Abs(v-5.05e-4) > 1e-15 {
		t.Errorf("gain: %g", v)
	}
	if g.Overload {
		t.Error("overload inside range")
	}
	if v := g.Read(2e-3, 0, 0); v != 1e-3 || !g.Overload {
		t.Errorf("over range: v = %g overload %v, want clipped 1e-3 and overload", v, g.Overload)
	}
	g.Read(0, 0, 0)
	if !g.Overload {
		t.Error("overload must latch until reset")
	}
	g.Reset(2e-3, 1)
	if g.Overload || g.Read(2e-3, 1, 0) != 0 {
		t.Error("reset did not zero")
	}
}

func TestFieldMeter(t *testing.T) {
	f := NewFieldMeter(FieldMeterParams{OffsetT: 1e-3, SensitivityError: 0.02, RangeT: 0.5})
	if v, ok := f.Read(0.1, 0); !ok || math.Abs(v-(0.102+1e-3)) > 1e-15 {
		t.Errorf("read = %g %v", v, ok)
	}
	if _, ok := f.Read(0.6, 0); ok {
		t.Error("over range not reported")
	}
	f.Zero(0)
	if v, _ := f.Read(0, 0); math.Abs(v) > 1e-15 {
		t.Errorf("after zero: %g", v)
	}
}

// TestEddyCurrentsWidenLoop: a fast sweep of a thick conductive ring widens
// the B(H) loop, and the extra area is the classical eddy loss
// ∫(σ·d²/12)·(dB/dt)² dt per cycle (thin-sheet formula, textbook) within 10 %.
func TestEddyCurrentsWidenLoop(t *testing.T) {
	type out struct{ w, hc, eddy float64 }
	loop := func(period float64, eddy bool) out {
		p := testParams()
		p.Supply.SlewAPerS = 1e4
		p.Supply.ComplianceV = 1e4
		if eddy {
			p.Specimen.Eddy = &EddyParams{ConductivitySM: 2e6, ThicknessMM: 2}
		}
		r, err := NewRig(p)
		if err != nil {
			t.Fatal(err)
		}
		k := 0.0
		if eddy {
			k = p.Specimen.Eddy.Coefficient()
		}
		r.Supply.Output = true
		iMax := 6000 * r.PathLength() / 200
		dt := period / 20000
		var hs, bs []float64
		extra := 0.0
		for c := 0; c < 3; c++ {
			hs, bs, extra = hs[:0], bs[:0], 0
			for i := 0; i < 20000; i++ {
				ph := float64(i) / 20000 // triangular: +max → −max → +max
				r.Supply.Setpoint = iMax * (1 - 4*math.Min(ph, 1-ph))
				b0 := r.State().B
				r.Step(dt)
				s := r.State()
				db := (s.B - b0) / dt
				extra += k * db * db * dt
				hs, bs = append(hs, s.H), append(bs, s.B)
			}
		}
		f := loopFigures(hs, bs)
		return out{f.w, f.hc, extra}
	}
	slow := loop(100, false)
	fast := loop(0.5, true)
	if !(fast.hc > 1.1*slow.hc) {
		t.Errorf("fast sweep Hc = %g A/m, slow %g: loop not visibly wider", fast.hc, slow.hc)
	}
	if e := relErr(fast.w-slow.w, fast.eddy); e > 0.10 {
		t.Errorf("extra loss %g J/m³, classical eddy loss %g J/m³ (%.1f %% apart)", fast.w-slow.w, fast.eddy, 100*e)
	}
	t.Logf("Hc slow %.1f fast %.1f A/m; W slow %.0f fast %.0f, eddy %.0f J/m³", slow.hc, fast.hc, slow.w, fast.w, fast.eddy)
}

func TestRigValidateNamesKey(t *testing.T) {
	p := testParams()
	p.Specimen.JilesAtherton.K = 0
	err := p.Validate()
	if err == nil || !strings.HasPrefix(err.Error(), "specimen.jiles_atherton.k_a_m:") {
		t.Errorf("err = %v", err)
	}
	p = testParams()
	p.Winding.N1 = 0
	if err := p.Validate(); err == nil || !strings.HasPrefix(err.Error(), "winding.n1:") {
		t.Errorf("err = %v", err)
	}
}

func BenchmarkRigStep(b *testing.B) {
	r, _ := NewRig(testParams())
	r.Supply.Output = true
	for i := 0; i < b.N; i++ {
		r.Supply.Setpoint = 10 * math.Sin(float64(i)*1e-3)
		r.Step(1e-3)
	}
}
