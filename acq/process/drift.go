package process

import (
	"math"

	"hystd/calib/correct"
)

// holdRate is the integrator's drift rate over a hold: ψ = a + r·t +
// c·(x − x̄) by least squares, x the H channel (current or probe reading,
// any scale). The x term takes up the flux that a field still settling in
// the hold links (a closed loop on a yoke overshoots and settles for some
// 100 ms after a ramp stops), which a plain straight line in time would
// count as drift; with the field truly static it fits noise only and leaves
// r unbiased. When x does not vary, or varies in step with time so that the
// two cannot be told apart, it is correct.DriftRate (ψ = a + r·t). U is the
// standard error of r from the residuals (GUM Type A). Samples with a
// non-finite x are left out of the three-term fit.
func holdRate(t, psi, x []float64) (correct.Rate, error) {
	plain := func() (correct.Rate, error) { return correct.DriftRate(t, psi) }
	n := len(t)
	if n < 4 || len(psi) != n || len(x) != n {
		return plain()
	}
	var mt, mp, mx float64
	for i := range t {
		if !finite(x[i]) {
			return plain()
		}
		mt += t[i]
		mp += psi[i]
		mx += x[i]
	}
	fn := float64(n)
	mt, mp, mx = mt/fn, mp/fn, mx/fn
	var stt, sxx, stx, stp, sxp float64
	for i := range t {
		dt, dx, dp := t[i]-mt, x[i]-mx, psi[i]-mp
		stt += dt * dt
		sxx += dx * dx
		stx += dt * dx
		stp += dt * dp
		sxp += dx * dp
	}
	det := stt*sxx - stx*stx
	// Collinear within 1e-6 (|correlation| > 0.9999995): t and x cannot be
	// told apart.
	if !(stt > 0 && sxx > 0) || !(det > 1e-6*stt*sxx) {
		return plain()
	}
	r := (sxx*stp - stx*sxp) / det
	c := (stt*sxp - stx*stp) / det
	var ss float64
	for i := range t {
		e := psi[i] - mp - r*(t[i]-mt) - c*(x[i]-mx)
		ss += e * e
	}
	u := math.Sqrt(ss / float64(n-3) * sxx / det)
	return correct.Rate{Rate: r, U: u, T: mt, N: n}, nil
}
