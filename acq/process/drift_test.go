package process

import (
	"math"
	"math/rand/v2"
	"testing"

	"hystd/calib/correct"
)

// TestHoldRate: the drift rate of a hold is the slope of ψ in time that the
// field does not explain. The integrator model is the usual one (REFERENCE
// §5, Arpaia et al. 2022): a constant input offset V_os integrates into
// ψ = V_os·t; a field that still moves adds k·ΔH (k = N2·A·μ0·μr, here a
// 2e-8 Wb-turns per A/m, about N2·A_c·μ0 of
// the simulated yoke). Case "settling field" is the closed loop
// on the simulated yoke after a ramp stops: an overshoot of 7 kA/m decaying
// with τ = 50 ms in a 0.5 s hold, which a straight line in time reads as a
// drift of about 1e-4 V, a hundred times V_os.
func TestHoldRate(t *testing.T) {
	const vos, k = 1e-6, 2e-8
	const n, dt = 25, 0.02
	for _, tc := range []struct {
		name      string
		h         func(t float64) float64
		plainBad  bool // a straight line in time misses V_os by more than 3 U
		collinear bool // x exactly linear in t, without noise
	}{
		{"static field", func(float64) float64 { return 6e5 }, false, false},
		{"settling field", func(t float64) float64 { return 6e5 + 7e3*math.Exp(-t/0.05) }, true, false},
		{"field ramping in step with time", func(t float64) float64 { return 6e5 + 1e3*t }, true, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := rand.New(rand.NewPCG(3, 4))
			tt, psi, x := make([]float64, n), make([]float64, n), make([]float64, n)
			for i := range n {
				tt[i] = float64(i) * dt
				x[i] = tc.h(tt[i]) + 40*r.NormFloat64() // probe noise 5e-5 T ≈ 40 A/m
				if tc.collinear {
					x[i] = tc.h(tt[i])
				}
				psi[i] = vos*tt[i] + k*(tc.h(tt[i])-6e5) + 1e-7*r.NormFloat64()
			}
			got, err := holdRate(tt, psi, x)
			if err != nil {
				t.Fatal(err)
			}
			plain, err := correct.DriftRate(tt, psi)
			if err != nil {
				t.Fatal(err)
			}
			t.Logf("rate %.4g ± %.2g V, straight line %.4g ± %.2g V", got.Rate, got.U, plain.Rate, plain.U)
			if tc.collinear {
				// Drift and field cannot be told apart: the plain fit is all
				// that can be said, and it is returned as is.
				if got != plain {
					t.Errorf("collinear: got %+v, want the straight line %+v", got, plain)
				}
				return
			}
			if math.Abs(got.Rate-vos) > 3*got.U || !(got.U > 0 && got.U < 5e-6) || got.N != n {
				t.Errorf("rate %.4g ± %.2g V (%d samples), want %.4g V", got.Rate, got.U, got.N, vos)
			}
			if bad := math.Abs(plain.Rate-vos) > 3*plain.U; bad != tc.plainBad {
				t.Errorf("straight line %.4g ± %.2g V: off = %v, want %v", plain.Rate, plain.U, bad, tc.plainBad)
			}
		})
	}
}

func TestHoldRateFallsBack(t *testing.T) {
	tt := []float64{0, 1, 2, 3, 4}
	psi := []float64{0, 1, 2, 3, 4.5}
	want, _ := correct.DriftRate(tt, psi)
	for _, tc := range []struct {
		name string
		x    []float64
	}{
		{"constant field", []float64{5, 5, 5, 5, 5}},
		{"missing field reading", []float64{1, math.NaN(), 2, 3, 1}},
		{"no field readings", nil},
	} {
		got, err := holdRate(tt, psi, tc.x)
		if err != nil || got != want {
			t.Errorf("%s: %+v, %v; want %+v", tc.name, got, err, want)
		}
	}
	if _, err := holdRate(tt[:2], psi[:2], []float64{1, 2}); err == nil {
		t.Error("two samples accepted")
	}
}
