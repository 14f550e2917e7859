package geometry

import (
	"math"
	"strings"
	"testing"

	"hystd/calib/units"
)

func relErr(got, want float64) float64 { return math.Abs(got-want) / math.Abs(want) }

// TestRingEffectiveIEC60205 checks REFERENCE §10 items 4 and 6: the IEC 60205
// formulas (C1 = Σl/A, C2 = Σl/A², l_e = C1²/C2, A_e = C1/C2, V_e = C1³/C2²)
// for rings, values worked in mm as IEC 60205 §2.1 does, 5 significant figures.
func TestRingEffectiveIEC60205(t *testing.T) {
	const mm = 1e-3
	tests := []struct {
		name       string
		od, id, h  float64 // mm
		c1, c2     float64 // mm⁻¹, mm⁻³; 0: not checked
		le, ae, ve float64 // mm, mm², mm³; 0: not checked
		tol        float64 // relative
	}{
		{"ring 50/40/10", 50, 40, 10, 2.8158, 0.056549, 140.21, 49.793, 6981.2, 1e-4},
		{"ring 56/40/10 (ratio 1.4)", 56, 40, 10, 0, 0, 147.99, 79.25, 0, 1e-4},
	}
	for _, tc := range tests {
		e, err := RingEffective(units.Metre(tc.id/2*mm), units.Metre(tc.od/2*mm), units.Metre(tc.h*mm))
		if err != nil {
			t.Fatal(err)
		}
		check := func(what string, got, want float64) {
			if want != 0 && relErr(got, want) > tc.tol {
				t.Errorf("%s %s = %.6g, want %.6g (IEC 60205 formulas, REFERENCE §10)", tc.name, what, got, want)
			}
		}
		check("C1 mm⁻¹", e.C1*mm, tc.c1)
		check("C2 mm⁻³", e.C2*mm*mm*mm, tc.c2)
		check("l_e mm", float64(e.Le)/mm, tc.le)
		check("A_e mm²", float64(e.Ae)/(mm*mm), tc.ae)
		check("V_e mm³", e.Ve/(mm*mm*mm), tc.ve)
	}
}

// TestRingH checks REFERENCE §10 item 5: ring 50/40/10 mm, N1 = 100, I = 2 A
// gives H = N1·I/l = 1414.71 A/m on π(D+d)/2 and 1426.48 A/m on l_e (±0.01 A/m).
// Ampère's law, IEC 60404-4 (mean path) and IEC 60205 (l_e).
func TestRingH(t *testing.T) {
	for _, tc := range []struct {
		path string
		want float64
	}{{PathMean, 1414.71}, {PathEffective, 1426.48}} {
		r, err := Ring(0.050, 0.040, 0.010, 1, tc.path, Tol{})
		if err != nil {
			t.Fatal(err)
		}
		if h := 100 * 2 / float64(r.PathLength); math.Abs(h-tc.want) > 0.01 {
			t.Errorf("%s path: H = %.4f A/m, want %.2f", tc.path, h, tc.want)
		}
		if len(r.Warnings) != 0 {
			t.Errorf("ratio 1.25 warned: %v", r.Warnings)
		}
	}
	// Mean-path area is h·(D−d)/2 = 10·5 mm² = 50 mm².
	r, _ := Ring(0.050, 0.040, 0.010, 0.95, PathMean, Tol{})
	if relErr(float64(r.Area), 0.95*50e-6) > 1e-12 {
		t.Errorf("stacked area %v, want 0.95·50 mm²", r.Area)
	}
}

func TestRingWarnsAboveRatio(t *testing.T) {
	r, err := Ring(0.060, 0.040, 0.010, 1, PathMean, Tol{})
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Warnings) != 1 || !strings.Contains(r.Warnings[0], "1.4") {
		t.Errorf("OD/ID 1.5: warnings %v, want one naming the 1.4 limit (IEC 60404-4)", r.Warnings)
	}
}

// TestEpstein checks REFERENCE §10 item 7: m = 1.000 kg, l = 0.300 m,
// ρ = 7650 kg/m³ give A = m/(4·l·ρ) = 108.93 mm², and N1 = 700, I = 1 A on
// l_m = 0.94 m give H = 744.68 A/m (IEC 60404-2; geometry from memory).
func TestEpstein(t *testing.T) {
	r, err := Epstein(1, 0.3, 7650, 0, Tol{})
	if err != nil {
		t.Fatal(err)
	}
	if a := float64(r.Area) * 1e6; math.Abs(a-108.93) > 0.005 {
		t.Errorf("A = %.4f mm², want 108.93", a)
	}
	if h := 700 * 1 / float64(r.PathLength); math.Abs(h-744.68) > 0.005 {
		t.Errorf("H = %.4f A/m, want 744.68", h)
	}
}

func TestStripAndDirect(t *testing.T) {
	// A = m/(l·ρ): 7.65 g of ρ = 7650 kg/m³ over 0.1 m is 1e-6 m³/0.1 m = 10 mm².
	r, err := Strip(7.65e-3, 0.1, 7650, 0, Tol{})
	if err != nil {
		t.Fatal(err)
	}
	if relErr(float64(r.Area), 10e-6) > 1e-12 || r.PathLength != 0.1 {
		t.Errorf("strip: %+v", r)
	}
	d, err := Direct(0.2, 1e-4, 0.001, 0.002)
	if err != nil || d.Volume != 0.2*1e-4 || d.RelUArea != 0.002 {
		t.Errorf("direct: %+v %v", d, err)
	}
}

// TestPropagation checks the sensitivity propagation against the analytic
// result for the mean-path ring: l = π(D+d)/2 gives u(l)/l = u·√2/(D+d);
// A = h(D−d)/2 gives u(A)/A = u·√(1/h² + 2/(D−d)²).
func TestPropagation(t *testing.T) {
	u := 1e-5
	r, err := Ring(0.05, 0.04, 0.01, 1, PathMean, Tol{Length: units.Metre(u)})
	if err != nil {
		t.Fatal(err)
	}
	wantL := u * math.Sqrt2 / 0.09
	wantA := u * math.Sqrt(1/(0.01*0.01)+2/(0.01*0.01))
	if relErr(r.RelUPath, wantL) > 1e-5 || relErr(r.RelUArea, wantA) > 1e-5 {
		t.Errorf("rel u: path %.6g (want %.6g), area %.6g (want %.6g)", r.RelUPath, wantL, r.RelUArea, wantA)
	}
}

func TestBadInput(t *testing.T) {
	if _, err := Ring(0.04, 0.05, 0.01, 1, PathMean, Tol{}); err == nil {
		t.Error("inner > outer accepted")
	}
	if _, err := Ring(0.05, 0.04, 0.01, 1, "inner", Tol{}); err == nil {
		t.Error("unknown path accepted")
	}
	if _, err := Ring(0.05, 0.04, 0.01, 1.2, PathMean, Tol{}); err == nil {
		t.Error("stacking 1.2 accepted")
	}
	if _, err := Epstein(1, 0.3, 7650, 6, Tol{}); err == nil {
		t.Error("6 strips accepted")
	}
	if _, err := Epstein(0, 0.3, 7650, 0, Tol{}); err == nil {
		t.Error("zero mass accepted")
	}
	if _, err := Strip(1, 0.3, units.KilogramPerCubicMetre(math.NaN()), 0, Tol{}); err == nil {
		t.Error("NaN density accepted")
	}
	if _, err := Direct(0, 1, 0, 0); err == nil {
		t.Error("zero path accepted")
	}
}
