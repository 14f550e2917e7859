package correct

import (
	"math"
	"testing"

	"hystd/calib/units"
)

func near(t *testing.T, what string, got, want, tol float64, src string) {
	t.Helper()
	if math.Abs(got-want) > tol || math.IsNaN(got) {
		t.Errorf("%s = %.10g, want %.10g ± %.2g [%s]", what, got, want, tol, src)
	}
}

// TestReferenceChecks covers REFERENCE §10 items 3, 8, 9, 10 and 11.
func TestReferenceChecks(t *testing.T) {
	// 3. J = B − μ0·H; B = 1.5 T, H = 10 kA/m → 1.487 434 T (CODATA 2018 μ0).
	j := Polarization(nil, []float64{10e3}, []float64{1.5})
	near(t, "J", j[0], 1.487434, 1e-6, "IEC 60404-2 definition of J, CODATA 2018 μ0")

	// 8. ψ = 5.0 mV·s, N2 = 100, A = 50 mm² → B = 1.000 T (ΔB = Δψ/(N2·A)).
	b := BFromFlux(nil, []float64{5e-3}, 100, 50e-6)
	near(t, "B from ψ", b[0], 1.0, 1e-12, "Faraday's law, textbook")

	// 9. V_os = 10 µV for 60 s, N2 = 100, A = 50 mm² → ΔB = 0.120 T
	// (Arpaia et al., Sensors 22(1):182, 2022: ΔB = V_os·t/(N2·A)).
	ts := make([]float64, 61)
	psi := make([]float64, 61)
	for i := range ts {
		ts[i] = float64(i)
		psi[i] = 10e-6 * ts[i]
	}
	r, err := DriftRate(ts, psi)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "drift rate V", r.Rate, 10e-6, 1e-18, "ψ = V_os·t")
	bd := BFromFlux(nil, psi, 100, 50e-6)
	near(t, "ΔB after 60 s", bd[60]-bd[0], 0.120, 1e-12, "Arpaia 2022")
	// Baseline from that rate removes it completely.
	m := Baseline(ts, psi, 0, r, r)
	near(t, "largest baseline Wb", m, 6e-4, 1e-15, "ψ = V_os·t")
	for i, p := range psi {
		if math.Abs(p) > 1e-18 {
			t.Fatalf("residual ψ[%d] = %g after baseline", i, p)
		}
	}
	// Linear closure correction at t = T/2 removes ε/2 (REFERENCE §5, [mem]).
	bc := make([]float64, 61)
	for i := range bc {
		bc[i] = 0.3 + 0.12*ts[i]/60 // closure error ε = 0.12 T over T = 60 s
	}
	eps := bc[60] - bc[0]
	near(t, "ε", eps, 0.12, 1e-12, "closure error B(T) − B(0)")
	if err := Closure(ts, bc, 0, 60, eps); err != nil {
		t.Fatal(err)
	}
	near(t, "B(T/2) after closure", bc[30], 0.3, 1e-12, "removes ε/2 at T/2")

	// 10. Centering: tips +2.10 T and −0.90 T → offset 0.60 T, tips ±1.50 T.
	tips := []float64{2.10, -0.90}
	off := Center(tips, tips[0], tips[1])
	near(t, "centering offset", off, 0.60, 1e-12, "REFERENCE §5 [mem]")
	near(t, "top tip", tips[0], 1.50, 1e-12, "")
	near(t, "bottom tip", tips[1], -1.50, 1e-12, "")

	// 11. Air flux: A_c = 60 mm², A = 50 mm², H = 10 kA/m → subtract
	// μ0·H·(A_c − A)/A = 2.513 mT (textbook; IEC 60404-4).
	ba := []float64{1.0}
	size := AirFlux(ba, []float64{10e3}, 60e-6, 50e-6)
	near(t, "air-flux correction T", size, 2.513e-3, 0.5e-6, "textbook; IEC 60404-4")
	near(t, "B after air flux", ba[0], 1-2.513274e-3, 1e-9, "")
}

// TestHFromCurrent: N1 = 700, I = 1 A on l_m = 0.94 m → 744.68 A/m
// (REFERENCE §10 item 7, Ampère's law).
func TestHFromCurrent(t *testing.T) {
	h := HFromCurrent(nil, []float64{1, -2}, 700, 0.94)
	near(t, "H", h[0], 744.68, 0.005, "Ampère's law, IEC 60404-2 l_m")
	near(t, "H(−2 A)", h[1], -2*700/0.94, 1e-9, "linear in I")
}

// TestProbe derives the expected values by hand from the calibration model.
func TestProbe(t *testing.T) {
	tests := []struct {
		name    string
		cal     ProbeCal
		r, temp float64
		want    float64 // T
	}{
		{"identity", ProbeCal{}, 0.5, math.NaN(), 0.5},
		{"offset", ProbeCal{Offset: 1e-3}, 0.5, math.NaN(), 0.499},
		{"gain", ProbeCal{Gain: 1.01}, 1.01, 23, 1},
		// sensitivity +0.1 %/K, 10 K above the reference: x = 1.01/(1.01) = 1.
		{"temperature", ProbeCal{Gain: 1, TempCoeff: 1e-3, RefTempC: 23}, 1.01, 33, 1},
		{"temperature unread", ProbeCal{Gain: 1, TempCoeff: 1e-3, RefTempC: 23}, 1.01, math.NaN(), 1.01},
		// B = 0.001 + 1.002·x + 0.01·x², x = 0.5: 0.001 + 0.501 + 0.0025.
		{"polynomial", ProbeCal{Poly: []float64{0.001, 1.002, 0.01}}, 0.5, math.NaN(), 0.5045},
	}
	for _, tc := range tests {
		h := HFromProbe(nil, []float64{tc.r}, []float64{tc.temp}, tc.cal)
		near(t, tc.name, h[0]*units.Mu0, tc.want, 1e-12, "H = B/μ0 (IEC 60404-5), calibration model")
	}
}

// TestDemag: a sphere (N = 1/3) of a linear material M = χ·H_int, χ = 10,
// in an applied field H_a has H_int = H_a/(1 + N·χ) (textbook magnetostatics).
func TestDemag(t *testing.T) {
	const n, chi, ha = 1.0 / 3, 10.0, 3000.0
	hint := ha / (1 + n*chi)
	b := units.Mu0 * (hint + chi*hint) // B = μ0(H_int + M)
	h := []float64{ha}
	size, err := Demag(h, []float64{b}, n)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "H_int", h[0], hint, 1e-9, "H_int = H_a/(1 + N·χ)")
	near(t, "N·M", size, ha-hint, 1e-9, "")
	if _, err := Demag(h, []float64{b}, 1); err == nil {
		t.Error("N = 1 accepted")
	}
}

// TestDriftRateUncertainty: residuals (+e, −e, −e, +e) repeated are
// orthogonal to 1 and t over each block of 4, so the fitted rate stays exact
// and u(r) = √(n·e²/(n−2)/Σ(t−t̄)²) (least-squares standard error, textbook).
func TestDriftRateUncertainty(t *testing.T) {
	const n, e, rate = 40, 1e-7, 2e-6
	ts, psi := make([]float64, n), make([]float64, n)
	pat := []float64{e, -e, -e, e}
	var mt float64
	for i := range ts {
		ts[i] = 0.5 * float64(i)
		psi[i] = 3e-4 + rate*ts[i] + pat[i%4]
		mt += ts[i] / n
	}
	var stt float64
	for _, x := range ts {
		stt += (x - mt) * (x - mt)
	}
	r, err := DriftRate(ts, psi)
	if err != nil {
		t.Fatal(err)
	}
	near(t, "rate", r.Rate, rate, 1e-15, "orthogonal residuals")
	near(t, "u(rate)", r.U, math.Sqrt(n*e*e/(n-2)/stt), 1e-15, "OLS standard error")
	if _, err := DriftRate(ts[:2], psi[:2]); err == nil {
		t.Error("2-sample hold accepted")
	}
	if _, err := DriftRate([]float64{1, 1, 1}, []float64{0, 1, 2}); err == nil {
		t.Error("zero-span hold accepted")
	}
}

// TestBaselineInterpolated: a drift rate that changes linearly from r0 to r1
// over [0, T] integrates to r0·t + (r1 − r0)·t²/(2T); Baseline removes it.
func TestBaselineInterpolated(t *testing.T) {
	const r0, r1, T = 1e-6, 3e-6, 100.0
	ts, psi := make([]float64, 101), make([]float64, 101)
	for i := range ts {
		ts[i] = float64(i)
		psi[i] = 0.01 + r0*ts[i] + (r1-r0)*ts[i]*ts[i]/(2*T)
	}
	Baseline(ts, psi, 0, Rate{Rate: r0, T: 0}, Rate{Rate: r1, T: T})
	for i := range psi {
		if math.Abs(psi[i]-0.01) > 1e-15 {
			t.Fatalf("ψ[%d] = %g, want 0.01", i, psi[i])
		}
	}
}

func TestAnchorAndClosureErrors(t *testing.T) {
	b := []float64{0.2, 0.5}
	if off := Anchor(b, 0); off != 0.2 || b[0] != 0 {
		t.Errorf("anchor: %v %v", off, b)
	}
	if err := Closure([]float64{0, 1}, b, 1, 0, 0.1); err == nil {
		t.Error("reversed closure accepted")
	}
	if AirFlux(b, []float64{1, 1}, 40e-6, 50e-6) != 0 {
		t.Error("air flux applied with coil smaller than specimen")
	}
}
