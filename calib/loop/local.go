package loop

import (
	"math"
	"sort"

	"hystd/calib/units"
)

// Values at crossings (Br, HcB, HcJ, Hk) are read on the samples
// themselves, by linear interpolation of the samples around the crossing,
// or by local parabolas in time where noise dominates (smooth.go).

// crossing kinds
const (
	crBr = iota // B (and J) at H = 0
	crHcB
	crHcJ
	crHk
	nCross
)

// windowSamples is the half-width of a fit window in samples for a branch
// of n samples: n/20, at least 24 and at most 250 (500 samples average
// the noise well enough; more only widen the piece the parabolas follow).
func windowSamples(n int) int { return min(250, max(24, n/20)) }

type local struct {
	h, b   []float64
	tm     func(int) float64
	start  []int // per branch
	end    []int
	cross  [][nCross]int // per branch; −1: none
	jr0    []float64     // nominal Jr per branch, for the Hk level
	window []int
	// scratch buffers of read
	bt, bx, by, bb []float64
	// lastVar is the noise variance of the last reading of read.
	lastVar  float64
	crossVar [nCross]float64
}

// medianCrossing returns the index i (start ≤ i < end) of the median sign
// change of q between i and i+1 among those where ok(i) holds, or −1.
func medianCrossing(start, end int, q func(int) float64, ok func(int) bool) int {
	var xs []int
	prev := q(start)
	for i := start; i < end; i++ {
		next := q(i + 1)
		if (prev <= 0 && next > 0 || prev >= 0 && next < 0) && prev != next && (ok == nil || ok(i)) {
			xs = append(xs, i)
		}
		prev = next
	}
	if len(xs) == 0 {
		return -1
	}
	sort.Ints(xs)
	return xs[len(xs)/2]
}

// zeroCrossings returns, in one pass, the median index of the sign changes
// of H, of B and of J = B − μ0·H between consecutive samples in
// [start, end], each −1 when there is none (see medianCrossing). B and J
// count only where they cross on the side of H = 0 a coercivity lies on:
// H ≤ 0 on a falling branch (dir −1), H ≥ 0 on a rising one, so that a
// curve whose level puts B = 0 near its start tip reports no coercivity.
func zeroCrossings(h, b []float64, start, end, dir int) (ih, ib, ij int) {
	var xh, xb, xj []int
	ph, pb := h[start], b[start]
	pj := pb - units.Mu0*ph
	for i := start; i < end; i++ {
		nh, nb := h[i+1], b[i+1]
		nj := nb - units.Mu0*nh
		side := float64(dir)*ph >= 0 || float64(dir)*nh >= 0 // H on the coercive side
		if dir == 0 {
			side = true
		}
		if (ph <= 0 && nh > 0) || (ph >= 0 && nh < 0) {
			xh = append(xh, i)
		}
		if side && ((pb <= 0 && nb > 0) || (pb >= 0 && nb < 0)) {
			xb = append(xb, i)
		}
		if side && ((pj <= 0 && nj > 0) || (pj >= 0 && nj < 0)) {
			xj = append(xj, i)
		}
		ph, pb, pj = nh, nb, nj
	}
	med := func(x []int) int {
		if len(x) == 0 {
			return -1
		}
		return x[len(x)/2]
	}
	return med(xh), med(xb), med(xj)
}

func (l *local) addBranch(start, end, dir int) {
	k := len(l.start)
	l.start, l.end = append(l.start, start), append(l.end, end)
	l.window = append(l.window, windowSamples(end-start+1))
	var c [nCross]int
	h, b := l.h, l.b
	c[crBr], c[crHcB], c[crHcJ] = zeroCrossings(h, b, start, end, dir)
	c[crHk] = -1
	l.cross = append(l.cross, c)
	l.jr0 = append(l.jr0, nan())
	if c[crBr] >= 0 {
		jr := l.read(k, variant{parity: -1}, crBr, func(p pt) (float64, float64) { return p.h, p.b - units.Mu0*p.h }, 0)
		l.jr0[k] = jr
		if jr > 0 {
			lvl := 0.9 * jr
			l.cross[k][crHk] = medianCrossing(start, end, func(i int) float64 { return b[i] - units.Mu0*h[i] - lvl },
				func(i int) bool { return h[i] < 0 })
		}
	}
}

// read returns y where x reaches x0 on branch k near crossing kind cr.
// The samples of a window around the crossing are taken in time order; the
// time where x reaches x0 is interpolated linearly between the two samples
// that bracket it (the pair nearest the median crossing), or found on a
// local parabola x(t) where the data show noise beyond the parabola's model
// error (see smooth.go); y is read at that time the same way. NaN when
// there is no crossing.
func (l *local) read(k int, v variant, cr int, get func(pt) (x, y float64), x0 float64) float64 {
	ic := l.cross[k][cr]
	if ic < 0 {
		return nan()
	}
	m := l.window[k]
	lo, hi := max(l.start[k], ic-m+1), min(l.end[k], ic+m)
	ts, xs, ys := l.bt[:0], l.bx[:0], l.by[:0]
	jc := -1
	for i := lo; i <= hi; i++ {
		if !v.keep(i) {
			continue
		}
		if i <= ic {
			jc = len(ts)
		}
		tt := l.tm(i)
		p := v.apply(pt{h: l.h[i], b: l.b[i], t: tt, t2: tt * tt})
		x, y := get(p)
		ts, xs, ys = append(ts, tt), append(xs, x), append(ys, y)
	}
	l.bt, l.bx, l.by = ts, xs, ys
	n := len(ts)
	if n < 2 {
		return nan()
	}
	jc = max(jc, 0)
	// The bracketing pair nearest the centre.
	js := -1
	for d := 0; d < n && js < 0; d++ {
		for _, j := range [2]int{jc + 1 + d, jc - d} {
			if j >= 1 && j < n && (xs[j]-x0)*(xs[j-1]-x0) <= 0 && xs[j] != xs[j-1] {
				js = j
				break
			}
		}
	}
	if js < 0 {
		return nan()
	}
	f := (x0 - xs[js-1]) / (xs[js] - xs[js-1])
	u := ts[js-1] + f*(ts[js]-ts[js-1])
	// Noise near the crossing, for the standard error of a reading by
	// interpolation (weights f and 1 − f).
	nlo, nhi := max(0, js-2*minWindow), min(n, js+2*minWindow)
	w2 := f*f + (1-f)*(1-f)
	dxdu := (xs[js] - xs[js-1]) / (ts[js] - ts[js-1])
	varU := interpNoise(ts[nlo:nhi], xs[nlo:nhi]) * w2 / (dxdu * dxdu)
	qx, noisyX := localFit(ts, xs, js)
	if noisyX {
		if r := quadRoot(qx, x0, u); !math.IsNaN(r) {
			u = r
			if sl := qx.slope(u); sl != 0 {
				varU = qx.se2(u) / (sl * sl)
			}
		}
	}
	jy := js
	for jy > 0 && ts[jy-1] > u {
		jy--
	}
	for jy+1 < n && ts[jy] < u {
		jy++
	}
	if q, ok := localFit(ts, ys, jy); ok {
		sl := q.slope(u)
		l.lastVar = q.se2(u) + sl*sl*varU
		return q.at(u)
	}
	j0 := max(jy, 1)
	dydu := (ys[j0] - ys[j0-1]) / (ts[j0] - ts[j0-1])
	l.lastVar = interpNoise(ts[nlo:nhi], ys[nlo:nhi])*w2 + dydu*dydu*varU
	if !noisyX {
		// Smooth data: the cubics through the four samples around the
		// crossing refine the straight line.
		if _, yc, ok := cubicCross(ts, xs, ys, js-1, x0); ok {
			return yc
		}
	}
	return interpAt(ts, ys, u)
}

// crossings reads Br, HcB, HcJ and (falling branches) Hk of branch k for a
// variant, as signed values; NaN where not found.
// The noise variances of the readings are left in l.crossVar (Br, HcB,
// HcJ, Hk).
func (l *local) crossings(k int, v variant, falling bool) (br, hcb, hcj, hk float64) {
	hb := func(p pt) (float64, float64) { return p.h, p.b }                 // B at H = x0
	hj := func(p pt) (float64, float64) { return p.h, p.b - units.Mu0*p.h } // J at H = x0
	bh := func(p pt) (float64, float64) { return p.b, p.h }                 // H at B = x0
	jh := func(p pt) (float64, float64) { return p.b - units.Mu0*p.h, p.h } // H at J = x0
	l.crossVar = [nCross]float64{}
	br = l.read(k, v, crBr, hb, 0)
	l.crossVar[crBr] = l.lastVar
	hcb = l.read(k, v, crHcB, bh, 0)
	l.crossVar[crHcB] = l.lastVar
	hcj = l.read(k, v, crHcJ, jh, 0)
	l.crossVar[crHcJ] = l.lastVar
	hk = nan()
	if falling {
		if jr := l.read(k, v, crBr, hj, 0); jr > 0 {
			hk = l.read(k, v, crHk, jh, 0.9*jr)
			l.crossVar[crHk] = l.lastVar
		}
	}
	return
}
