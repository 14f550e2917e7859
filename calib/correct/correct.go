// Package correct turns raw channel readings into H, B and J and applies the
// corrections of a DC loop measurement: air flux, integrator drift baseline,
// closure of cyclic loops, centering, demagnetizing field. Pure numerics on
// float64 slices in SI units (s, A, Wb-turns, T, A/m); nothing here does I/O.
//
// Functions that write a result take a dst slice and return it, reusing its
// storage when it is long enough (dst may be one of the inputs). No function
// keeps a reference to its arguments; none is safe for concurrent writes to
// the same slice.
package correct

import (
	"errors"
	"fmt"
	"math"

	"hystd/calib/units"
)

func grow(dst []float64, n int) []float64 {
	if cap(dst) < n {
		return make([]float64, n)
	}
	return dst[:n]
}

// HFromCurrent returns H = N1·I/l_m in A/m for each current I in A
// (Ampère's law on a closed magnetic circuit).
func HFromCurrent(dst, current []float64, n1 int, pathLength units.Metre) []float64 {
	dst = grow(dst, len(current))
	k := float64(n1) / float64(pathLength)
	for i, c := range current {
		dst[i] = k * c
	}
	return dst
}

// ProbeCal is the calibration of a field meter (Hall probe): a reading r in
// T becomes x = (r − Offset) / (Gain·(1 + TempCoeff·(T − RefTempC))) and
// then B = Σ Poly[i]·xⁱ (no polynomial: B = x). The zero value is the
// identity (Gain 0 is taken as 1).
type ProbeCal struct {
	Offset    units.Tesla
	Gain      float64   // sensitivity relative to the meter's own, 1 = as read
	TempCoeff float64   // relative change of sensitivity per K
	RefTempC  float64   // °C where Gain holds
	Poly      []float64 // B = Σ Poly[i]·xⁱ in T, x in T; empty: B = x
}

// Field returns the calibrated flux density at the probe for a reading in T
// at temperature tempC (NaN: no temperature correction).
func (c ProbeCal) Field(reading float64, tempC float64) float64 {
	g := c.Gain
	if g == 0 {
		g = 1
	}
	if c.TempCoeff != 0 && !math.IsNaN(tempC) {
		g *= 1 + c.TempCoeff*(tempC-c.RefTempC)
	}
	x := (reading - float64(c.Offset)) / g
	if len(c.Poly) == 0 {
		return x
	}
	b := 0.0
	for i := len(c.Poly) - 1; i >= 0; i-- {
		b = b*x + c.Poly[i]
	}
	return b
}

// HFromProbe returns H = B/μ0 in A/m for field-meter readings in T beside
// the specimen, through the calibration cal. temps (°C) may be nil or hold
// NaN where no temperature was read.
func HFromProbe(dst, readings, temps []float64, cal ProbeCal) []float64 {
	dst = grow(dst, len(readings))
	for i, r := range readings {
		t := math.NaN()
		if temps != nil {
			t = temps[i]
		}
		dst[i] = cal.Field(r, t) / units.Mu0
	}
	return dst
}

// BFromFlux returns B = ψ/(N2·A) in T for flux linkages ψ in Wb-turns.
func BFromFlux(dst, psi []float64, n2 int, area units.SquareMetre) []float64 {
	dst = grow(dst, len(psi))
	k := 1 / (float64(n2) * float64(area))
	for i, p := range psi {
		dst[i] = k * p
	}
	return dst
}

// AirFlux removes the flux of the air between the specimen (area A) and a
// search coil of area coilArea > A: B −= μ0·H·(A_c − A)/A, in place. It
// returns the largest correction in T (0 when coilArea ≤ A).
func AirFlux(b, h []float64, coilArea, area units.SquareMetre) float64 {
	if coilArea <= area {
		return 0
	}
	k := units.Mu0 * float64(coilArea-area) / float64(area)
	m := 0.0
	for i := range b {
		d := k * h[i]
		b[i] -= d
		if d < 0 {
			d = -d
		}
		if d > m {
			m = d
		}
	}
	return m
}

// Polarization returns J = B − μ0·H in T.
func Polarization(dst, h, b []float64) []float64 {
	dst = grow(dst, len(b))
	for i := range b {
		dst[i] = b[i] - units.Mu0*h[i]
	}
	return dst
}

// Demag corrects the field of an open specimen for its own demagnetizing
// field, in place: with the applied field H_a and the measured B,
// M = (B/μ0 − H_a)/(1 − N) and H_int = H_a − N·M. It returns the largest
// |N·M| in A/m. n must be in [0, 1).
func Demag(h, b []float64, n float64) (float64, error) {
	if !(n >= 0 && n < 1) {
		return 0, fmt.Errorf("demagnetizing factor %g: must be in [0, 1)", n)
	}
	m := 0.0
	if n == 0 {
		return 0, nil
	}
	for i := range h {
		mag := (b[i]/units.Mu0 - h[i]) / (1 - n)
		d := n * mag
		h[i] -= d
		if d < 0 {
			d = -d
		}
		if d > m {
			m = d
		}
	}
	return m, nil
}

// Rate is a drift rate of the integrator with its standard uncertainty, in
// Wb-turns/s (= V), at time T (s, the middle of the hold it was measured on).
type Rate struct {
	Rate, U float64
	T       float64
	N       int // samples used
}

// ErrShortHold is returned by DriftRate for a hold of fewer than 3 samples or
// no time span.
var ErrShortHold = errors.New("drift hold too short: need at least 3 samples over a non-zero time")

// DriftRate fits ψ = a + r·t by least squares over a static hold and returns
// r with its standard uncertainty from the residuals (GUM Type A). t in s.
func DriftRate(t, psi []float64) (Rate, error) {
	n := len(t)
	if n < 3 || len(psi) != n {
		return Rate{}, ErrShortHold
	}
	var mt, mp float64
	for i := range t {
		mt += t[i]
		mp += psi[i]
	}
	mt /= float64(n)
	mp /= float64(n)
	var stt, stp float64
	for i := range t {
		dt := t[i] - mt
		stt += dt * dt
		stp += dt * (psi[i] - mp)
	}
	if !(stt > 0) {
		return Rate{}, ErrShortHold
	}
	r := stp / stt
	var ss float64
	for i := range t {
		e := psi[i] - mp - r*(t[i]-mt)
		ss += e * e
	}
	u := math.Sqrt(ss / float64(n-2) / stt)
	return Rate{Rate: r, U: u, T: mt, N: n}, nil
}

// Baseline subtracts the integrated drift from ψ in place, with the drift
// rate interpolated linearly in time between pre (at pre.T) and post (at
// post.T); pass post = pre when only one hold was measured. The baseline is
// zero at t0 (s), so ψ keeps its value there. With equal rates it is a
// straight line. It returns the largest |baseline| subtracted, in Wb-turns.
func Baseline(t, psi []float64, t0 float64, pre, post Rate) float64 {
	r0, r1 := pre.Rate, post.Rate
	slope := 0.0
	if post.T != pre.T {
		slope = (r1 - r0) / (post.T - pre.T)
	}
	// rate(t) = r0 + slope·(t − pre.T); baseline(t) = ∫_{t0}^{t} rate.
	prim := func(x float64) float64 { d := x - pre.T; return r0*d + slope*d*d/2 }
	p0 := prim(t0)
	m := 0.0
	for i := range psi {
		b := prim(t[i]) - p0
		psi[i] -= b
		if b < 0 {
			b = -b
		}
		if b > m {
			m = b
		}
	}
	return m
}

// Closure removes the closure error of a cyclic loop in place. eps (T) is
// B(t_b) − B(t_a) between two moments ta < tb (s) of the same magnetic state
// (two tips of the same kind); it is removed as B(t) −= eps·(t − ta)/(tb − ta)
// over all samples, extrapolated outside [ta, tb].
func Closure(t, b []float64, ta, tb, eps float64) error {
	if !(tb > ta) || math.IsNaN(eps) || math.IsInf(eps, 0) {
		return fmt.Errorf("closure: need ta < tb and a finite error (got %g, %g, %g)", ta, tb, eps)
	}
	span := tb - ta
	for i := range b {
		b[i] -= eps * (t[i] - ta) / span
	}
	return nil
}

// Center shifts B in place so that the loop's tips are symmetric:
// offset = (B_top + B_bottom)/2 is subtracted. It returns the offset in T.
func Center(b []float64, bTop, bBottom float64) float64 {
	off := (bTop + bBottom) / 2
	for i := range b {
		b[i] -= off
	}
	return off
}

// Anchor shifts B in place so that B(i0) = 0: the absolute level of a curve
// that starts from a demagnetized state. It returns the shift in T.
func Anchor(b []float64, i0 int) float64 {
	off := b[i0]
	for i := range b {
		b[i] -= off
	}
	return off
}
