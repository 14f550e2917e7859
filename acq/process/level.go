package process

import (
	"errors"
	"fmt"
	"math"

	"hystd/acq/record"
	"hystd/calib/units"
)

// TopFraction is the part of a loop's H range, below its top tip, whose
// points TopOf fits: wide enough to average the noise of both passes
// through the tip, narrow enough that B is close to a straight line in H
// there (a saturated specimen responds reversibly).
const TopFraction = 0.05

// TopMargin is how far (as a fraction of the loop's H range) beyond the
// fitted window a start field may lie and still be read from the fit.
const TopMargin = 0.01

// TopLevel is the absolute level of a centred symmetric loop near its top
// tip: B = B0 + Slope·(H − HRef) fitted by least squares on the corrected
// points whose H lies within TopFraction of the loop's H range below the
// tip. The start of an open curve measured afterwards at the same field in
// the same (saturated) state takes its level from it. The zero value is
// not usable; build it with TopOf.
type TopLevel struct {
	HLo, HHi float64 // H window of the fitted points, A/m
	Span     float64 // H range of the whole loop, A/m
	HRef     float64 // mean H of the fitted points, A/m
	B0       float64 // B at HRef, T
	Slope    float64 // dB/dH, T per A/m
	// S is the residual standard deviation of the fit (T): noise of both
	// passes through the tip and what is left of the closure error.
	S   float64
	Sxx float64 // Σ(H − HRef)², (A/m)²
	N   int     // points fitted
	// Gap is the mean B of the falling-branch points less that of the
	// rising-branch points in the window, about the common line (T), and
	// UGap its standard error (0 when a branch has no points there). A
	// saturated specimen is reversible near the tip, so its two branches
	// coincide there: a gap beyond the noise says the loop may not saturate,
	// and the level read from the common line may be off by about Gap/2.
	Gap, UGap float64
}

// ErrNoTop is returned by TopOf for points that give no usable top tip.
var ErrNoTop = errors.New("no top tip to take a level from")

// TopOf fits the top end of a centred symmetric loop given as the corrected
// points Loop returned for it (with DriftCyclic). It needs at least 5 points
// in the window with H spread over it.
func TopOf(points []record.Point) (TopLevel, error) {
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, p := range points {
		lo, hi = math.Min(lo, p.H), math.Max(hi, p.H)
	}
	span := hi - lo
	if !(span > 0) || math.IsInf(span, 0) {
		return TopLevel{}, fmt.Errorf("%w: H does not vary over the %d points", ErrNoTop, len(points))
	}
	l := TopLevel{HLo: math.Inf(1), HHi: hi, Span: span}
	edge := hi - TopFraction*span
	var sh, sb float64
	for _, p := range points {
		if p.H >= edge {
			l.N++
			sh += p.H
			sb += p.B
			l.HLo = math.Min(l.HLo, p.H)
		}
	}
	if l.N < 5 {
		return TopLevel{}, fmt.Errorf("%w: %d points within %.0f %% of the H range below the tip at %.6g A/m, need 5",
			ErrNoTop, l.N, 100*TopFraction, hi)
	}
	l.HRef, l.B0 = sh/float64(l.N), sb/float64(l.N)
	var sxy float64
	for _, p := range points {
		if p.H >= edge {
			dh := p.H - l.HRef
			l.Sxx += dh * dh
			sxy += dh * (p.B - l.B0)
		}
	}
	if !(l.Sxx > 0) {
		return TopLevel{}, fmt.Errorf("%w: the %d points near the tip all have H = %.6g A/m", ErrNoTop, l.N, l.HRef)
	}
	l.Slope = sxy / l.Sxx
	var ss, rf, rr float64
	var nf, nr int
	for _, p := range points {
		if p.H >= edge {
			r := p.B - l.B0 - l.Slope*(p.H-l.HRef)
			ss += r * r
			switch p.Branch {
			case -1:
				rf, nf = rf+r, nf+1
			case 1:
				rr, nr = rr+r, nr+1
			}
		}
	}
	l.S = math.Sqrt(ss / float64(l.N-2))
	if nf > 0 && nr > 0 && l.N > 3 {
		mf, mr := rf/float64(nf), rr/float64(nr)
		l.Gap = mf - mr
		// Scatter about each branch's own level, so that the gap itself
		// does not inflate its uncertainty.
		sep := math.Sqrt(math.Max(0, ss-float64(nf)*mf*mf-float64(nr)*mr*mr) / float64(l.N-3))
		l.UGap = sep * math.Sqrt(1/float64(nf)+1/float64(nr))
	}
	return l, nil
}

// At returns B and its standard uncertainty (the fit's standard error at h)
// at the field h (A/m). It refuses a field outside the fitted window by
// more than TopMargin of the loop's range: that start is not at the tip of
// this loop, so it is not known to be in the same state.
func (l TopLevel) At(h float64) (b, u units.Tesla, err error) {
	if l.N < 5 {
		return 0, 0, ErrNoTop
	}
	m := TopMargin * l.Span
	if !(h >= l.HLo-m && h <= l.HHi+m) {
		//lint:ignore ST1005 H is the field's symbol
		return 0, 0, fmt.Errorf("H = %.6g A/m is not at this loop's top tip (its points near the tip span %.6g to %.6g A/m, margin %.3g A/m)",
			h, l.HLo, l.HHi, m)
	}
	dh := h - l.HRef
	se := l.S * math.Sqrt(1/float64(l.N)+dh*dh/l.Sxx)
	return units.Tesla(l.B0 + l.Slope*dh), units.Tesla(se), nil
}
