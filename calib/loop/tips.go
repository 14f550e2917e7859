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
// keep accepts; get returns H and B of sample i, tm its time.
func readTip(r tipRef, tm func(int) float64, get func(int) (float64, float64), keep func(int) bool) Tip {
	e := r.index
	he, be := get(e)
	tp := Tip{Index: e, Top: r.top, T: tm(e), H: he, B: be, N: 1}
	sgn := 1.0
	if !r.top {
		sgn = -1
	}
	// A tip within a few samples of the start or end of the record (a
	// sweep that starts or ends at the tip): noise may have put the extreme
	// sample a little inside, so the samples before it belong to the same
	// side; with noise, the line through all of them is read at the
	// record's end.
	if cutL, cutR := r.lo == 0 && e < 2*minWindow, r.last && r.hi-e < 2*minWindow; cutL || cutR {
		var u, hh, bb []float64
		if cutL {
			for i := r.lo; i <= r.hi && len(u) < tipSide; i++ {
				if keep(i) {
					h, b := get(i)
					u, hh, bb = append(u, tm(i)), append(hh, h), append(bb, b)
				}
			}
		} else {
			for i := r.hi; i >= r.lo && len(u) < tipSide; i-- {
				if keep(i) {
					h, b := get(i)
					u, hh, bb = append(u, tm(i)), append(hh, h), append(bb, b)
				}
			}
		}
		if len(u) >= 2 {
			lH, noisy := sideLine(u, hh)
			lB, _ := sideLine(u, bb)
			if noisy {
				tp.T, tp.H, tp.B, tp.N = u[0], lH.at(u[0]), lB.at(u[0]), len(u)
			}
			// Without an accepted window the tip is its sample, with the
			// samples' noise.
			tp.vH, tp.vB = lH.se2(u[0]), lB.se2(u[0])
			tp.UB = math.Sqrt(tp.vB)
			if noisy {
				return tp
			}
		}
	}
	var lu, lh, lb, ru, rh, rb []float64 // ordered from the tip outwards
	for i := e - 1; i >= r.lo && len(lu) < tipSide; i-- {
		if keep(i) {
			h, b := get(i)
			lu, lh, lb = append(lu, tm(i)), append(lh, h), append(lb, b)
		}
	}
	for i := e + 1; i <= r.hi && len(ru) < tipSide; i++ {
		if keep(i) {
			h, b := get(i)
			ru, rh, rb = append(ru, tm(i)), append(rh, h), append(rb, b)
		}
	}
	if len(lu) < 2 && len(ru) < 2 {
		return tp
	}
	if len(lu) < 2 || len(ru) < 2 {
		// A tip at the start or end of the record: its own sample, or the
		// line of the one side at its time when that side is noisy.
		u, hh, bb := lu, lh, lb
		if len(ru) >= 2 {
			u, hh, bb = ru, rh, rb
		}
		u = append([]float64{tm(e)}, u...)
		hh = append([]float64{he}, hh...)
		bb = append([]float64{be}, bb...)
		lH, nH := sideLine(u, hh)
		if nH {
			tp.H = lH.at(tm(e))
		}
		lB, nB := sideLine(u, bb)
		if nB {
			tp.B = lB.at(tm(e))
		}
		tp.vH, tp.vB = lH.se2(tm(e)), lB.se2(tm(e))
		tp.UB = math.Sqrt(tp.vB)
		return tp
	}
	lH, nl := sideLine(lu, lh)
	rH, nr := sideLine(ru, rh)
	smooth := !nl && !nr
	if smooth && keep(e) {
		// The extreme sample joins the side whose line it continues; the
		// apex is recomputed with it.
		if ta := apex(lH, rH); !math.IsNaN(ta) {
			if tm(e) <= ta {
				lu = append([]float64{tm(e)}, lu...)
				lh = append([]float64{he}, lh...)
				lb = append([]float64{be}, lb...)
				lH = fitLine(lu, lh, 2)
			} else {
				ru = append([]float64{tm(e)}, ru...)
				rh = append([]float64{he}, rh...)
				rb = append([]float64{be}, rb...)
				rH = fitLine(ru, rh, 2)
			}
		}
	}
	ta := apex(lH, rH)
	// The apex must lie between the samples next to the extreme one (with
	// noise: within the samples fitted), and on smooth data beyond the
	// extreme sample's H; otherwise the extreme sample is the tip.
	// With noise, each side must climb to the tip by more than three
	// standard errors of its slope (left rising to a top, right falling
	// from it): flat sides have no apex.
	steep := func(l line, want float64) bool {
		return want*l.b > 0 && (l.s2 == 0 || l.b*l.b*l.sxx > 9*l.s2)
	}
	if math.IsNaN(ta) || smooth && (ta < lu[min(1, len(lu)-1)] || ta > ru[min(1, len(ru)-1)]) ||
		ta < lu[len(lu)-1] || ta > ru[len(ru)-1] || !smooth && (!steep(lH, sgn) || !steep(rH, -sgn)) {
		if !smooth {
			// No apex (a tip held flat, e.g. under closed-loop control):
			// the extreme sample would pick the largest noise; the mean of
			// the samples around it within two noise deviations of its H
			// is the tip instead.
			return plateau(tp, lu[:max(int(lH.n), 1)], lh, lb, ru[:max(int(rH.n), 1)], rh, rb)
		}
		return tp
	}
	ha := (lH.at(ta) + rH.at(ta)) / 2
	if smooth && sgn*(ha-he) < 0 {
		return tp
	}
	tp.T, tp.H, tp.N = ta, ha, len(lu)+len(ru)
	// H at the intersection of y1 = a1 + b1·t and y2 = a2 + b2·t varies as
	// (b2²·var y1 + b1²·var y2)/(b2 − b1)² at the apex.
	if d := rH.b - lH.b; d != 0 {
		tp.vH = (rH.b*rH.b*lH.se2(ta) + lH.b*lH.b*rH.se2(ta)) / (d * d)
	}
	if smooth && keep(e) && math.Abs(tm(e)-ta) <= 1e-6*math.Abs(ru[0]-lu[0]) {
		tp.T, tp.H, tp.B = tm(e), he, be // the extreme sample is the apex
		return tp
	}
	lB, _ := sideLine(lu, lb)
	rB, _ := sideLine(ru, rb)
	bl, br := lB.at(ta), rB.at(ta)
	tp.B = (bl + br) / 2
	tp.vB = (lB.se2(ta) + rB.se2(ta)) / 4
	tp.UB = math.Sqrt(tp.vB + (bl-br)*(bl-br)/4)
	return tp
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

// apex returns the time where two lines of H(t) meet, NaN if parallel.
func apex(l, r line) float64 {
	d := l.b - r.b
	if d == 0 {
		return nan()
	}
	return (r.a - l.a + l.b*l.u0 - r.b*r.u0) / d
}
