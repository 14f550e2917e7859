package process

import (
	"math"

	"hystd/calib/correct"
	"hystd/calib/loop"
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

// tipSlope is dB/dH (T per A/m) at the tip at sample i: a least-squares
// line over the contiguous samples around i whose H lies within band (A/m)
// of h[i]. ok is false with fewer than 5 such samples or no spread in H.
func tipSlope(h, b []float64, i int, band float64) (slope float64, ok bool) {
	if i < 0 || i >= len(h) || len(b) != len(h) {
		return 0, false
	}
	lo, hi := i, i
	for lo > 0 && math.Abs(h[lo-1]-h[i]) <= band {
		lo--
	}
	for hi+1 < len(h) && math.Abs(h[hi+1]-h[i]) <= band {
		hi++
	}
	n := hi - lo + 1
	if n < 5 {
		return 0, false
	}
	var mh, mb float64
	for j := lo; j <= hi; j++ {
		mh += h[j]
		mb += b[j]
	}
	mh, mb = mh/float64(n), mb/float64(n)
	var shh, shb float64
	for j := lo; j <= hi; j++ {
		shh += (h[j] - mh) * (h[j] - mh)
		shb += (h[j] - mh) * (b[j] - mb)
	}
	if !(shh > 0) {
		return 0, false
	}
	return shb / shh, true
}

// tipAsymmetry returns H_top + H_bottom (A/m, the mean H of the top tips
// plus that of the bottom tips: 0 for a loop whose tips are at ±the same
// field) and the mean slope dB/dH at the tips (tipSlope with band). ok is
// false when a kind of tip is missing or no slope could be fitted.
func tipAsymmetry(t, h, b []float64, tips []loop.Tip, band float64) (sumH, slope float64, ok bool) {
	var ht, hb, ks float64
	var nt, nb, nk int
	for _, tp := range tips {
		if tp.Top {
			ht += tp.H
			nt++
		} else {
			hb += tp.H
			nb++
		}
		if k, ok := tipSlope(h, b, tp.Index, band); ok {
			ks += k
			nk++
		}
	}
	if nt == 0 || nb == 0 || nk == 0 {
		return 0, 0, false
	}
	return ht/float64(nt) + hb/float64(nb), ks / float64(nk), true
}
