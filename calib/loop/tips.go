package loop

import "math"

// Tips returns the tips at the ends of complete segments, in time order.
// Each tip is the apex of the sweep H(t): the intersection of straight
// lines through the samples on both sides of the extreme sample (through
// the two samples nearest the tip on each side when the data are smooth, a
// least-squares line over a window sized from the noise when they scatter),
// with B read on each side at the apex time and averaged. A triangular sweep
// thus gives its true tip even when no sample falls on it. t may be nil
// (index used as time).
func (s Shape) Tips(t, h, b []float64) []Tip {
	tm := func(i int) float64 {
		if t == nil {
			return float64(i)
		}
		return t[i]
	}
	get := func(i int) (float64, float64) { return h[i], b[i] }
	all := func(int) bool { return true }
	var out []Tip
	for _, r := range s.tipRefs() {
		out = append(out, readTip(r, tm, get, all))
	}
	return out
}

// tipRefs returns the extreme samples at the ends of complete segments, in
// time order, with the range of samples their sides may use (the adjacent
// segments).
func (s Shape) tipRefs() []tipRef {
	seen := map[int]bool{}
	var out []tipRef
	for k, g := range s.Segments {
		if !g.Complete {
			continue
		}
		for _, i := range []int{g.Start, g.End} {
			if seen[i] {
				continue
			}
			seen[i] = true
			top := i == g.End && g.Dir == Rising || i == g.Start && g.Dir == Falling
			r := tipRef{index: i, top: top}
			if i == g.Start {
				r.hi = g.End
				if k > 0 {
					r.lo = s.Segments[k-1].Start
				}
			} else {
				r.lo = g.Start
				r.hi = s.N - 1
				r.last = true
				if k+1 < len(s.Segments) {
					r.hi = s.Segments[k+1].End
					r.last = r.hi == s.N-1
				}
			}
			out = append(out, r)
		}
	}
	for i := 1; i < len(out); i++ {
		for j := i; j > 0 && out[j].index < out[j-1].index; j-- {
			out[j], out[j-1] = out[j-1], out[j]
		}
	}
	return out
}

// tipSide is at most this many samples: the sweep near a tip is straight
// over far fewer, and the noise is averaged enough.
const tipSide = 200

// line is v = a + b·(u − u0), fitted to n points of mean ū and
// Σ(u − ū)² = sxx with residual variance s2.
type line struct{ a, b, u0, s2, n, ubar, sxx, bias2 float64 }

func (l line) at(u float64) float64 { return l.a + l.b*(u-l.u0) }

// se2 returns the variance of the fitted value at u, with the square of
// the curvature bias the window may leave (estimator error).
func (l line) se2(u float64) float64 {
	if l.n < 3 || !(l.sxx > 0) {
		return l.bias2
	}
	d := u - l.ubar
	return l.s2*(1/l.n+d*d/l.sxx) + l.bias2
}

// fitLine fits a least-squares line to the first n points.
func fitLine(u, v []float64, n int) line {
	u0 := u[0]
	var su, sv, suu, suv float64
	for i := 0; i < n; i++ {
		x := u[i] - u0
		su += x
		sv += v[i]
		suu += x * x
		suv += x * v[i]
	}
	fn := float64(n)
	den := fn*suu - su*su
	if !(den > 0) {
		return line{a: sv / fn, u0: u0}
	}
	b := (fn*suv - su*sv) / den
	l := line{a: (sv - b*su) / fn, b: b, u0: u0, n: fn, ubar: u0 + su/fn, sxx: suu - su*su/fn}
	ss := 0.0
	for i := 0; i < n; i++ {
		e := v[i] - l.at(u[i])
		ss += e * e
	}
	if n > 2 {
		l.s2 = ss / float64(n-2)
	}
	return l
}

// sideLine returns the line of v(u) on one side of a tip, the points
// ordered from the tip outwards: through the two nearest points when the
// data are smooth, else the least-squares line over the widest window whose
// residual variance the noise alone explains (as in smooth.go). noisy
// reports which.
func sideLine(u, v []float64) (l line, noisy bool) {
	n := len(u)
	if n == 1 {
		return line{a: v[0], u0: u[0]}, false
	}
	two := fitLine(u, v, 2)
	miss := 0 // windows rejected in a row: two end the search (one may be chance)
	for m := 2 * minWindow; m <= n && miss < 2; m = m*3/2 + 1 {
		// The noise over at least 32 points: fewer give too uncertain an
		// estimate to judge a window by.
		k := min(n, max(m, 4*noiseSpan))
		s2 := interpNoise(u[:k], v[:k])
		if !(s2 > 0) {
			break
		}
		q := fitLine(u, v, m)
		bent, bias := curved(u, v, m)
		if q.s2 > s2*(1+2*math.Sqrt(2/float64(m-2))) || bent {
			miss++
			continue
		}
		q.bias2 = bias * bias
		l, noisy, miss = q, true, 0
	}
	if !noisy {
		// No window passed, but the samples may still scatter: the line
		// through the two nearest then carries their noise (a sample's
		// variance, as a floor).
		k := min(n, 4*noiseSpan)
		two.bias2 = interpNoise(u[:k], v[:k])
		return two, false
	}
	return l, true
}

// curved reports whether a parabola through the first m points has a
// quadratic term more than twice its standard error: the line would be
// biased at the tip by more than its own noise.
// bias is the size of the line's error at the tip that the quadratic term
// would cause: a line fitted to c·x² over 0 ≤ x ≤ L misses it at x = 0 by
// c·L²/6, which is 2/3 of the term in the parabola's scaled coordinate.
func curved(u, v []float64, m int) (bool, float64) {
	x := make([]float64, m)
	for i := range x {
		x[i] = math.Abs(u[i] - u[0])
	}
	q, ok := fitQuad(x, v, 0, m-1)
	if !ok {
		return false, 0
	}
	return math.Abs(q.c[2]) > 2*math.Sqrt(q.s2*math.Max(q.inv[2][2], 0)), 2 * math.Abs(q.c[2]) / 3
}

// readTip finds the apex of the tip r (see Tips) among the samples that
// keep accepts; get returns H and B of sample i, tm its time. Its stages:
// a tip at the record's start or end (tipAtEnd), the samples on both sides
// (sides), a tip with one side only (oneSided), and the apex of both
// (apexTip).
func readTip(r tipRef, tm func(int) float64, get func(int) (float64, float64), keep func(int) bool) Tip {
	e := r.index
	he, be := get(e)
	tp := Tip{Index: e, Top: r.top, T: tm(e), H: he, B: be, N: 1}
	if t, ok := tipAtEnd(r, tp, tm, get, keep); ok {
		return t
	}
	l, rt := sides(r, tm, get, keep)
	if len(l.u) < 2 && len(rt.u) < 2 {
		return tp
	}
	if len(l.u) < 2 || len(rt.u) < 2 {
		return oneSided(tp, l, rt)
	}
	return apexTip(tp, l, rt, keep(e))
}

// side holds the samples on one side of a tip, ordered from the tip
// outwards.
type side struct{ u, h, b []float64 }

func (s *side) add(u, h, b float64) { s.u, s.h, s.b = append(s.u, u), append(s.h, h), append(s.b, b) }

// prepend puts the tip's own sample first.
func (s side) prepend(u, h, b float64) side {
	return side{append([]float64{u}, s.u...), append([]float64{h}, s.h...), append([]float64{b}, s.b...)}
}

// collect gathers up to tipSide kept samples from i onwards in steps of
// di while i stays within [lo, hi].
func collect(i, di, lo, hi int, tm func(int) float64, get func(int) (float64, float64), keep func(int) bool) side {
	n := hi - i + 1
	if di < 0 {
		n = i - lo + 1
	}
	n = max(min(n, tipSide), 0)
	s := side{make([]float64, 0, n), make([]float64, 0, n), make([]float64, 0, n)}
	for ; i >= lo && i <= hi && len(s.u) < tipSide; i += di {
		if keep(i) {
			h, b := get(i)
			s.add(tm(i), h, b)
		}
	}
	return s
}

// sides returns the samples before and after the extreme sample.
func sides(r tipRef, tm func(int) float64, get func(int) (float64, float64), keep func(int) bool) (side, side) {
	return collect(r.index-1, -1, r.lo, r.hi, tm, get, keep), collect(r.index+1, 1, r.lo, r.hi, tm, get, keep)
}

// tipAtEnd reads a tip within a few samples of the start or end of the
// record (a sweep that starts or ends at the tip): noise may have put the
// extreme sample a little inside, so the samples before it belong to the
// same side; with noise, the line through all of them is read at the
// record's end (ok). Without an accepted window the tip is left to the
// other stages.
func tipAtEnd(r tipRef, tp Tip, tm func(int) float64, get func(int) (float64, float64), keep func(int) bool) (Tip, bool) {
	e := r.index
	cutL, cutR := r.lo == 0 && e < 2*minWindow, r.last && r.hi-e < 2*minWindow
	if !cutL && !cutR {
		return tp, false
	}
	s := collect(r.lo, 1, r.lo, r.hi, tm, get, keep)
	if !cutL {
		s = collect(r.hi, -1, r.lo, r.hi, tm, get, keep)
	}
	if len(s.u) < 2 {
		return tp, false
	}
	lH, noisy := sideLine(s.u, s.h)
	lB, _ := sideLine(s.u, s.b)
	if !noisy {
		return tp, false
	}
	tp.T, tp.H, tp.B, tp.N = s.u[0], lH.at(s.u[0]), lB.at(s.u[0]), len(s.u)
	tp.vH, tp.vB = lH.se2(s.u[0]), lB.se2(s.u[0])
	tp.UB = math.Sqrt(tp.vB)
	return tp, true
}

// oneSided reads a tip at the start or end of the record with samples on
// one side only: its own sample, or the line of that side at its time when
// the side is noisy.
func oneSided(tp Tip, l, r side) Tip {
	s := l
	if len(r.u) >= 2 {
		s = r
	}
	s = s.prepend(tp.T, tp.H, tp.B)
	lH, nH := sideLine(s.u, s.h)
	if nH {
		tp.H = lH.at(tp.T)
	}
	lB, nB := sideLine(s.u, s.b)
	if nB {
		tp.B = lB.at(tp.T)
	}
	tp.vH, tp.vB = lH.se2(tp.T), lB.se2(tp.T)
	tp.UB = math.Sqrt(tp.vB)
	return tp
}

// apexTip reads a tip with samples on both sides: where the lines of H(t)
// on both sides meet (a triangular sweep, whose sides are straight), or the
// vertex of a parabola of H(t) around the extreme sample where the tip is
// rounded (a sinusoidal sweep, a supply whose current lags its setpoint):
// lines through the samples on both sides of a rounded tip meet above it,
// by about the curvature times the square of the sample step. kept says
// whether the extreme sample itself is accepted.
func apexTip(tp Tip, l, r side, kept bool) Tip {
	sgn := 1.0
	if !tp.Top {
		sgn = -1
	}
	lH, nl := sideLine(l.u, l.h)
	rH, nr := sideLine(r.u, r.h)
	if !nl && !nr {
		return smoothApex(tp, l, r, lH, rH, kept, sgn)
	}
	if t, ok := noisyRounded(tp, l, r, sgn); ok {
		return t
	}
	ta := apex(lH, rH)
	// The apex must lie within the samples fitted, and each side must
	// climb to the tip by more than three standard errors of its slope
	// (left rising to a top, right falling from it): flat sides have no
	// apex.
	steep := func(l line, want float64) bool {
		return want*l.b > 0 && (l.s2 == 0 || l.b*l.b*l.sxx > 9*l.s2)
	}
	if math.IsNaN(ta) || ta < l.u[len(l.u)-1] || ta > r.u[len(r.u)-1] || !steep(lH, sgn) || !steep(rH, -sgn) {
		// No apex (a tip held flat, e.g. under closed-loop control):
		// the extreme sample would pick the largest noise; the mean of
		// it and the sides' flat windows at its level is the tip instead
		// (flatSides).
		lw, rw := flatSides(sgn, l.h, r.h, lH, rH, steep(lH, sgn), steep(rH, -sgn))
		return plateau(tp, l.u[:lw], l.h, l.b, r.u[:rw], r.h, r.b)
	}
	return linesApex(tp, l, r, lH, rH, ta)
}

// linesApex is the tip where the lines lH and rH of H(t) meet at ta, with B
// read on each side at ta and averaged.
func linesApex(tp Tip, l, r side, lH, rH line, ta float64) Tip {
	tp.T, tp.H, tp.N = ta, (lH.at(ta)+rH.at(ta))/2, len(l.u)+len(r.u)
	tp.vH = apexVar(lH, rH, ta)
	lB, _ := sideLine(l.u, l.b)
	rB, _ := sideLine(r.u, r.b)
	bl, br := lB.at(ta), rB.at(ta)
	tp.B = (bl + br) / 2
	tp.vB = (lB.se2(ta) + rB.se2(ta)) / 4
	tp.UB = math.Sqrt(tp.vB + (bl-br)*(bl-br)/4)
	return tp
}

// apexVar is the variance of H where the lines meet at ta: H at the
// intersection of y1 = a1 + b1·t and y2 = a2 + b2·t varies as
// (b2²·var y1 + b1²·var y2)/(b2 − b1)².
func apexVar(lH, rH line, ta float64) float64 {
	d := rH.b - lH.b
	if d == 0 {
		return 0
	}
	return (rH.b*rH.b*lH.se2(ta) + lH.b*lH.b*rH.se2(ta)) / (d * d)
}

// smoothApex reads the tip of smooth data. Two models of the sweep near the
// tip are tried on the extreme sample, left out: the lines through the two
// nearest samples on each side (a triangular tip) and the parabola through
// those four (a rounded one). The one that predicts the extreme sample
// better reads the tip; its miss there is taken as its own error (it
// enters vH). A rounded tip is the vertex of the parabola through the
// extreme sample and its two neighbours, kept between the extreme sample
// (which lies below the apex) and the lines' apex (which lies above a
// concave tip), so it is never worse than the extreme sample.
func smoothApex(tp Tip, l, r side, lH, rH line, kept bool, sgn float64) Tip {
	te, he, be := tp.T, tp.H, tp.B
	missK, missP := math.Inf(1), math.Inf(1)
	if kept {
		missK = math.Abs(sgn*math.Min(sgn*lH.at(te), sgn*rH.at(te)) - he)
		if q, ok := fitQuad([]float64{l.u[1], l.u[0], r.u[0], r.u[1]}, []float64{l.h[1], l.h[0], r.h[0], r.h[1]}, 0, 3); ok {
			missP = math.Abs(q.at(te) - he)
		}
		if missK <= roundOff*math.Abs(he) {
			missK = 0 // straight sides, to round-off
		}
	}
	floor := (lH.bias2 + rH.bias2) / 2 // the samples' own noise, if any
	if kept {
		// The extreme sample joins the side whose line it continues; the
		// apex is recomputed with it.
		if ta := apex(lH, rH); !math.IsNaN(ta) {
			if te <= ta {
				l = l.prepend(te, he, be)
				lH = fitLine(l.u, l.h, 2)
			} else {
				r = r.prepend(te, he, be)
				rH = fitLine(r.u, r.h, 2)
			}
		}
	}
	ta := apex(lH, rH)
	// The apex must lie between the samples next to the extreme one and
	// beyond the extreme sample's H; otherwise the extreme sample is the
	// tip.
	if math.IsNaN(ta) || ta < l.u[min(1, len(l.u)-1)] || ta > r.u[min(1, len(r.u)-1)] {
		return tp
	}
	ha := (lH.at(ta) + rH.at(ta)) / 2
	if sgn*(ha-he) < 0 {
		return tp
	}
	if kept && missP < missK {
		return roundedApex(tp, l, r, ha, missP, floor, sgn)
	}
	if kept && math.Abs(te-ta) <= 1e-6*math.Abs(r.u[0]-l.u[0]) {
		tp.N = len(l.u) + len(r.u)
		tp.vH = apexVar(lH, rH, ta) + missK*missK
		return tp // the extreme sample is the apex
	}
	tp = linesApex(tp, l, r, lH, rH, ta)
	tp.vH += missK * missK
	return tp
}

// roundedApex is the vertex of the parabola of H(t) through the extreme
// sample and its two neighbours (l and r already hold the extreme sample on
// one side), kept between the extreme sample and the lines' apex ha; B is
// read at the vertex time from the parabola of B(t) through the same
// samples. miss is the parabola model's error on the extreme sample, floor
// the samples' noise variance.
func roundedApex(tp Tip, l, r side, ha, miss, floor, sgn float64) Tip {
	// Three samples in time order: the extreme one and its neighbours.
	var u, h, b []float64
	if l.u[0] == tp.T {
		u, h, b = []float64{l.u[1], l.u[0], r.u[0]}, []float64{l.h[1], l.h[0], r.h[0]}, []float64{l.b[1], l.b[0], r.b[0]}
	} else {
		u, h, b = []float64{l.u[0], r.u[0], r.u[1]}, []float64{l.h[0], r.h[0], r.h[1]}, []float64{l.b[0], r.b[0], r.b[1]}
	}
	qh, ok := fitQuad(u, h, 0, 2)
	if !ok || !(sgn*qh.c[2] < 0) {
		tp.vH = floor + miss*miss
		return tp
	}
	x := -qh.c[1] / (2 * qh.c[2]) // vertex in the parabola's scaled time
	tv := qh.uc + x*qh.scale
	if tv < u[0] || tv > u[2] {
		tp.vH = floor + miss*miss
		return tp
	}
	hv := qh.at(tv)
	// Between the extreme sample and the lines' apex.
	hv = sgn * math.Min(math.Max(sgn*hv, sgn*tp.H), sgn*ha)
	tp.T, tp.H, tp.N = tv, hv, 3
	tp.vH = floor + miss*miss
	if qb, ok := fitQuad(u, b, 0, 2); ok {
		tp.B = qb.at(tv)
	}
	return tp
}

// noisyRounded reads a noisy tip as the vertex of a least-squares parabola
// of H(t) over a window centred on the extreme sample, widened while no
// quartic term shows in its residuals (a kink shows as one too), when the parabola bends
// significantly and fits that window about as well as two lines meeting
// at the extreme sample: a rounded tip, where lines would meet above the
// tip. A triangular tip keeps the lines, which fit it better. vH is the
// parabola's standard error at the vertex with its model error from the
// cubic and quartic terms left in the residuals; B is read at the vertex
// from the parabola of B(t) over the same samples. ok is false where the
// lines are kept.
func noisyRounded(tp Tip, l, r side, sgn float64) (Tip, bool) {
	c := len(l.u) // the extreme sample's place in u
	n := c + 1 + len(r.u)
	u, h, b := make([]float64, 0, n), make([]float64, 0, n), make([]float64, 0, n)
	for i := c - 1; i >= 0; i-- {
		u, h, b = append(u, l.u[i]), append(h, l.h[i]), append(b, l.b[i])
	}
	u, h, b = append(u, tp.T), append(h, tp.H), append(b, tp.B)
	u, h, b = append(u, r.u...), append(h, r.h...), append(b, r.b...)
	// Every window up to the widest the sides allow is tried: a quartic
	// term grows with the window, so a wide one passes only where there is
	// none, while narrow ones may fail by chance.
	var q quad
	found := false
	for m := 2 * minWindow; c-m >= 0 && c+m < n; m = m*3/2 + 1 {
		if f, ok := fitQuad(u, h, c-m, c+m); ok && !quartic(f, u, h, c-m, c+m) {
			q, found = f, true
		}
	}
	if !found || !(sgn*q.c[2] < 0) || q.c[2]*q.c[2] <= 9*q.s2*q.inv[2][2] {
		return tp, false
	}
	m := q.n / 2
	kl := fitLine(u[c-m:c+1], h[c-m:c+1], m+1)
	kr := fitLine(u[c+1:c+m+1], h[c+1:c+m+1], m)
	ssK := kl.s2*float64(m-1) + kr.s2*float64(m-2)
	if q.s2*float64(q.n-3)-ssK > 4*ssK/float64(q.n-4) {
		return tp, false
	}
	x := -q.c[1] / (2 * q.c[2])
	tv := q.uc + x*q.scale
	if tv < q.lo || tv > q.hi {
		return tp, false
	}
	lo, hi := c-q.n/2, c+q.n/2
	tp.T, tp.H, tp.N = tv, q.at(tv), q.n
	m4 := quarticLeft(q, u, h, lo, hi) * p4(x)
	tp.vH = q.se2(tv) + m4*m4
	if qb, ok := fitQuad(u, b, lo, hi); ok {
		tp.B, tp.vB = qb.at(tv), qb.se2(tv)
		tp.UB = math.Sqrt(tp.vB)
	}
	return tp, true
}

// p4 is the Legendre polynomial P4(x) = (35x⁴ − 30x² + 3)/8, to which a
// parabola fitted over [−1, 1] reduces a quartic term.
func p4(x float64) float64 { x2 := x * x; return (35*x2*x2 - 30*x2 + 3) / 8 }

// quarticLeft returns the coefficient of P4 in the residuals of the
// parabola q over samples lo…hi (their projection on P4 in q's scaled
// time): the quartic term the parabola cannot follow.
func quarticLeft(q quad, u, v []float64, lo, hi int) float64 {
	var sp, pp float64
	for i := lo; i <= hi; i++ {
		p := p4((u[i] - q.uc) / q.scale)
		sp += (v[i] - q.at(u[i])) * p
		pp += p * p
	}
	if !(pp > 0) {
		return 0
	}
	return sp / pp
}

// quartic reports whether the parabola q over samples lo…hi leaves a
// quartic term more than twice its standard error: a wider window would
// bias the vertex (by 3/8 of that term at the centre).
func quartic(q quad, u, v []float64, lo, hi int) bool {
	var pp float64
	for i := lo; i <= hi; i++ {
		p := p4((u[i] - q.uc) / q.scale)
		pp += p * p
	}
	a := quarticLeft(q, u, v, lo, hi)
	return pp > 0 && a*a > 4*q.s2/pp
}

// apex returns the time where two lines of H(t) meet, NaN if parallel.
func apex(l, r line) float64 {
	d := l.b - r.b
	if d == 0 {
		return nan()
	}
	return (r.a - l.a + l.b*l.u0 - r.b*r.u0) / d
}

// flatSides returns how many samples of each side's window (lH, rH fitted
// to the samples of h nearest the tip) belong to a plateau at the tip: none
// of a side that climbs to the tip (lSteep, rSteep), and none of a flat side
// whose level lies off the other's, beyond three standard errors of the
// difference of their means, on the side away from the tip. A staircase
// sampled a few readings a step gives both: its top step held at the end of
// the record has a sloped window on one side, and a step left without
// readings puts a flat window one step below the tip. Averaged with the
// tip, either pulled it down the branch (by 400 A/m, and 15 A/m of a 20 A/m
// gap, on the buffered demo).
func flatSides(sgn float64, lh, rh []float64, lH, rH line, lSteep, rSteep bool) (lw, rw int) {
	lw, rw = max(int(lH.n), 1), max(int(rH.n), 1)
	if lSteep {
		lw = 0
	}
	if rSteep {
		rw = 0
	}
	if lw == 0 || rw == 0 {
		return lw, rw
	}
	ml, mr := meanOf(lh[:lw]), meanOf(rh[:rw])
	if d := ml - mr; d*d > 9*(lH.s2/float64(lw)+rH.s2/float64(rw)) {
		if sgn*d > 0 {
			return lw, 0
		}
		return 0, rw
	}
	return lw, rw
}

// plateau returns the tip as the mean of the extreme sample and the
// samples of both sides' flat windows (lu and ru cut to the windows' length;
// chosen by position, not by value, so the mean is unbiased), with the
// standard errors of the means.
func plateau(tp Tip, lu, lh, lb, ru, rh, rb []float64) Tip {
	var n, sh, shh, sb, sbb, st float64
	add := func(u, h, b float64) {
		n, sh, shh, sb, sbb, st = n+1, sh+h, shh+h*h, sb+b, sbb+b*b, st+u
	}
	add(tp.T, tp.H, tp.B)
	for i := range lu {
		add(lu[i], lh[i], lb[i])
	}
	for i := range ru {
		add(ru[i], rh[i], rb[i])
	}
	tp.T, tp.H, tp.B, tp.N = st/n, sh/n, sb/n, int(n)
	if n > 1 {
		vh := math.Max(shh/n-tp.H*tp.H, 0) * n / (n - 1)
		vb := math.Max(sbb/n-tp.B*tp.B, 0) * n / (n - 1)
		tp.vH, tp.vB = vh/n, vb/n
		tp.UB = math.Sqrt(tp.vB)
	}
	return tp
}
