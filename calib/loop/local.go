package loop

import (
	"math"
	"sort"

	"hystd/calib/units"
)

// Values at crossings (Br, HcB, HcJ, Hk) are read on the samples
// themselves: around the crossing, a window of samples in time order is
// fitted with a least-squares parabola of the read quantity against the
// crossing quantity, evaluated at the crossing level. Bins would limit the
// resolution to their width; the window follows the local sample density.

// crossing kinds
const (
	crBr = iota // B (and J) at H = 0
	crHcB
	crHcJ
	crHk
	nCross
)

// windowSamples is the half-width of a fit window in samples for a branch
// of n samples: n/200, at least 6 and at most 500 (1000 samples average
// the noise well enough; more only widen the piece the parabolas follow).
func windowSamples(n int) int { return min(500, max(6, n/200)) }

type local struct {
	h, b   []float64
	tm     func(int) float64
	start  []int // per branch
	end    []int
	cross  [][nCross]int // per branch; −1: none
	jr0    []float64     // nominal Jr per branch, for the Hk level
	window []int
	// scratch buffers of read
	bt, bx, by, bu []float64
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
// [start, end], each −1 when there is none (see medianCrossing).
func zeroCrossings(h, b []float64, start, end int) (ih, ib, ij int) {
	var xh, xb, xj []int
	ph, pb := h[start], b[start]
	pj := pb - units.Mu0*ph
	for i := start; i < end; i++ {
		nh, nb := h[i+1], b[i+1]
		nj := nb - units.Mu0*nh
		if (ph <= 0 && nh > 0) || (ph >= 0 && nh < 0) {
			xh = append(xh, i)
		}
		if (pb <= 0 && nb > 0) || (pb >= 0 && nb < 0) {
			xb = append(xb, i)
		}
		if (pj <= 0 && nj > 0) || (pj >= 0 && nj < 0) {
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

func (l *local) addBranch(start, end int) {
	k := len(l.start)
	l.start, l.end = append(l.start, start), append(l.end, end)
	l.window = append(l.window, windowSamples(end-start+1))
	var c [nCross]int
	h, b := l.h, l.b
	c[crBr], c[crHcB], c[crHcJ] = zeroCrossings(h, b, start, end)
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
// Both are fitted as least-squares parabolas in time over the window of
// samples around the crossing; the time where the x parabola reaches x0
// (the root nearest the crossing) gives y from its parabola. When x jumps
// between two samples (one step larger than half the window's range of x)
// the two samples around the jump are interpolated linearly instead.
// NaN when there is no crossing or too few samples.
func (l *local) read(k int, v variant, cr int, get func(pt) (x, y float64), x0 float64) float64 {
	ic := l.cross[k][cr]
	if ic < 0 {
		return nan()
	}
	m := l.window[k]
	if v.half {
		m *= 2
	}
	lo, hi := max(l.start[k], ic-m+1), min(l.end[k], ic+m)
	ts, xs, ys := l.bt[:0], l.bx[:0], l.by[:0]
	for i := lo; i <= hi; i++ {
		if v.parity >= 0 && i%nSub != v.parity {
			continue
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
	xmin, xmax, step, js := xs[0], xs[0], 0.0, -1
	for j := 1; j < n; j++ {
		xmin, xmax = math.Min(xmin, xs[j]), math.Max(xmax, xs[j])
		d := math.Abs(xs[j] - xs[j-1])
		if (xs[j]-x0)*(xs[j-1]-x0) <= 0 && d > step {
			step, js = d, j
		}
	}
	if js > 0 && (step > 0.5*(xmax-xmin) || n < 5) {
		f := (x0 - xs[js-1]) / (xs[js] - xs[js-1])
		return ys[js-1] + f*(ys[js]-ys[js-1])
	}
	if n < 5 {
		return nan()
	}
	tc := l.tm(ic)
	scale := math.Max(math.Abs(ts[0]-tc), math.Abs(ts[n-1]-tc))
	if !(scale > 0) {
		return nan()
	}
	var s [5]float64
	var rx, ry [3]float64
	for j := range ts {
		u := (ts[j] - tc) / scale
		up := 1.0
		for q := 0; q < 5; q++ {
			s[q] += up
			if q < 3 {
				rx[q] += xs[j] * up
				ry[q] += ys[j] * up
			}
			up *= u
		}
	}
	a := [3][3]float64{{s[0], s[1], s[2]}, {s[1], s[2], s[3]}, {s[2], s[3], s[4]}}
	cx, ok1 := solve3(a, rx)
	cy, ok2 := solve3(a, ry)
	if !ok1 || !ok2 {
		return nan()
	}
	// A parabola that misses the shape (a kink, a knee) leaves residuals
	// that follow each other; white noise leaves uncorrelated ones. Where
	// the residuals are correlated the samples themselves are interpolated.
	us := l.bu[:0]
	for j := range ts {
		us = append(us, (ts[j]-tc)/scale)
	}
	l.bu = us
	smoothX := correlated(us, xs, cx)
	smoothY := correlated(us, ys, cy)
	u := math.NaN()
	if smoothX && js > 0 {
		f := (x0 - xs[js-1]) / (xs[js] - xs[js-1])
		u = us[js-1] + f*(us[js]-us[js-1])
	} else {
		// Root of cx0 − x0 + cx1·u + cx2·u² nearest u = 0.
		c0, c1, c2 := cx[0]-x0, cx[1], cx[2]
		if math.Abs(c2) < 1e-12*math.Abs(c1) {
			u = -c0 / c1
		} else if d := c1*c1 - 4*c2*c0; d >= 0 {
			sq := math.Sqrt(d)
			qq := -0.5 * (c1 + math.Copysign(sq, c1)) // numerically stable pair of roots
			r1, r2 := qq/c2, c0/qq
			u = r1
			if math.Abs(r2) < math.Abs(r1) {
				u = r2
			}
		}
	}
	if math.IsNaN(u) || math.IsInf(u, 0) || math.Abs(u) > 1 {
		return nan()
	}
	if smoothY {
		// Interpolate y between the samples around u.
		for j := 1; j < n; j++ {
			if us[j] >= u {
				f := 0.0
				if us[j] > us[j-1] {
					f = (u - us[j-1]) / (us[j] - us[j-1])
				}
				return ys[j-1] + f*(ys[j]-ys[j-1])
			}
		}
		return ys[n-1]
	}
	return cy[0] + cy[1]*u + cy[2]*u*u
}

// correlated reports whether the residuals of the parabola c through the
// points (u, v) have a lag-1 autocorrelation above 0.6: the parabola does
// not describe the shape, or there is no noise to average.
func correlated(u, v []float64, c [3]float64) bool {
	var s0, s1, prev float64
	for j := range u {
		e := v[j] - (c[0] + c[1]*u[j] + c[2]*u[j]*u[j])
		s0 += e * e
		if j > 0 {
			s1 += e * prev
		}
		prev = e
	}
	if s0 == 0 {
		return true
	}
	return s1/s0 > 0.6
}

// crossings reads Br, HcB, HcJ and (falling branches) Hk of branch k for a
// variant, as signed values; NaN where not found.
func (l *local) crossings(k int, v variant, falling bool) (br, hcb, hcj, hk float64) {
	hb := func(p pt) (float64, float64) { return p.h, p.b }                 // B at H = x0
	hj := func(p pt) (float64, float64) { return p.h, p.b - units.Mu0*p.h } // J at H = x0
	bh := func(p pt) (float64, float64) { return p.b, p.h }                 // H at B = x0
	jh := func(p pt) (float64, float64) { return p.b - units.Mu0*p.h, p.h } // H at J = x0
	br = l.read(k, v, crBr, hb, 0)
	hcb = l.read(k, v, crHcB, bh, 0)
	hcj = l.read(k, v, crHcJ, jh, 0)
	hk = nan()
	if falling {
		if jr := l.read(k, v, crBr, hj, 0); jr > 0 {
			hk = l.read(k, v, crHk, jh, 0.9*jr)
		}
	}
	return
}
