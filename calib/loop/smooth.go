package loop

import "math"

// Reading a value between samples: plain linear interpolation of the two
// samples around the point is exact to second order in the sample spacing
// and is what smooth (noise-free) data deserve. A local least-squares
// parabola only pays where the data scatter by more than the parabola's own
// model error: the decision compares the two. The scatter is estimated from
// the residual of every sample from the straight line through its two
// neighbours (see interpNoise); a smooth curve adds only its third-order
// term to it. A parabola over
// a window of samples is accepted while its residual variance stays within
// the statistical scatter of that noise estimate; the widest accepted window
// is used, so the window is never wider than the curvature allows. With no
// accepted window the samples are interpolated.

// roundOff is the relative scatter below which data count as smooth: the
// residuals of exact values written with 15–17 digits, or of sums of them.
const roundOff = 1e-11

// interpNoise returns the estimate of the noise variance of v(u) (u
// ascending or descending): the mean
// square residual of each sample from the parabola through its neighbours
// i−1, i+1 and i+2, divided by the residual's variance factor for white
// noise (1 + Σ w², w the Lagrange weights), so that white noise of
// variance σ² gives σ² while a smooth curve gives only its third-order
// term, O(Δ³), far below its curvature. 0 with fewer than 4 points or when
// the scatter is at the level of round-off.
func interpNoise(u, v []float64) float64 {
	var s, n, vmax float64
	for _, x := range v {
		vmax = math.Max(vmax, math.Abs(x))
	}
	for i := 1; i+2 < len(u); i++ {
		a, b, c, x := u[i-1], u[i+1], u[i+2], u[i]
		if !(a < x && x < b && b < c) && !(a > x && x > b && b > c) {
			continue
		}
		wa := (x - b) * (x - c) / ((a - b) * (a - c))
		wb := (x - a) * (x - c) / ((b - a) * (b - c))
		wc := (x - a) * (x - b) / ((c - a) * (c - b))
		e := v[i] - (wa*v[i-1] + wb*v[i+1] + wc*v[i+2])
		s += e * e / (1 + wa*wa + wb*wb + wc*wc)
		n++
	}
	if n == 0 || s/n <= (roundOff*vmax)*(roundOff*vmax) {
		return 0
	}
	return s / n
}

// quad is a least-squares parabola c0 + c1·x + c2·x² in x = (u − uc)/scale.
type quad struct {
	c         [3]float64
	inv       [3][3]float64 // inverse of the normal matrix, for the standard error
	uc, scale float64
	s2        float64 // residual variance ss/(n − 3)
	c3        float64 // cubic term left in the residuals, for the model error
	n         int
	lo, hi    float64 // range of u fitted
}

func (q quad) at(u float64) float64 {
	x := (u - q.uc) / q.scale
	return q.c[0] + x*(q.c[1]+x*q.c[2])
}

// slope returns dv/du of the parabola at u.
func (q quad) slope(u float64) float64 {
	x := (u - q.uc) / q.scale
	return (q.c[1] + 2*q.c[2]*x) / q.scale
}

// se2 returns the variance of the fitted value at u from the residual
// scatter, s²·xᵀ(XᵀX)⁻¹x with x = (1, x, x²), plus the square of the
// model error a cubic term c3·x³ left in the residuals would cause there:
// a parabola fitted to x³ over [−1, 1] follows 0.6·x, so it misses by
// c3·(x³ − 0.6·x) (the estimator's own error from the local shape).
func (q quad) se2(u float64) float64 {
	x := (u - q.uc) / q.scale
	z := [3]float64{1, x, x * x}
	g := 0.0
	for i := range 3 {
		for j := range 3 {
			g += z[i] * q.inv[i][j] * z[j]
		}
	}
	m := q.c3 * (x*x*x - 0.6*x)
	return q.s2*math.Max(g, 0) + m*m
}

// fitQuad fits the parabola to (u[i], v[i]) for lo ≤ i ≤ hi (u ascending);
// through three points it is exact (s2 = 0).
func fitQuad(u, v []float64, lo, hi int) (quad, bool) {
	n := hi - lo + 1
	if n < 3 {
		return quad{}, false
	}
	q := quad{uc: (u[lo] + u[hi]) / 2, scale: (u[hi] - u[lo]) / 2, n: n, lo: u[lo], hi: u[hi]}
	if !(q.scale > 0) {
		return quad{}, false
	}
	var s [5]float64
	var r [3]float64
	for i := lo; i <= hi; i++ {
		x := (u[i] - q.uc) / q.scale
		xp := 1.0
		for k := 0; k < 5; k++ {
			s[k] += xp
			if k < 3 {
				r[k] += v[i] * xp
			}
			xp *= x
		}
	}
	nm := [3][3]float64{{s[0], s[1], s[2]}, {s[1], s[2], s[3]}, {s[2], s[3], s[4]}}
	c, ok := solve3(nm, r)
	if !ok {
		return quad{}, false
	}
	q.c = c
	for k := range 3 {
		var e [3]float64
		e[k] = 1
		col, _ := solve3(nm, e)
		for i := range 3 {
			q.inv[i][k] = col[i]
		}
	}
	ss, r3, x6 := 0.0, 0.0, 0.0
	for i := lo; i <= hi; i++ {
		e := v[i] - q.at(u[i])
		ss += e * e
		x := (u[i] - q.uc) / q.scale
		r3 += e * x * x * x
		x6 += x * x * x * x * x * x
	}
	if n > 3 {
		q.s2 = ss / float64(n-3)
	}
	if x6 > 0 {
		q.c3 = r3 / x6
	}
	return q, true
}

// accepts reports whether a fit's residual variance is consistent with the
// noise variance s2 alone: within twice the relative standard deviation
// √(2/(n−3)) of a variance estimated from n − 3 degrees of freedom.
func accepts(q quad, s2 float64) bool {
	return q.s2 <= s2*(1+1*math.Sqrt(2/float64(q.n-3)))
}

// minWindow is the smallest half-width (in samples) of a local fit: a
// parabola through fewer samples averages too little noise to beat the
// interpolation.
const minWindow = 4

// noiseSpan is the least half-width (in samples) over which the noise is
// estimated to judge a window.
const noiseSpan = 8

// localFit returns the widest accepted parabola of v(u) centred on index c
// (half-widths minWindow, ×1.5, … up to the data), each window judged
// against the noise estimated over that same window, or ok = false when the
// data are smooth at this point (no window accepted, or no noise).
func localFit(u, v []float64, c int) (best quad, ok bool) {
	miss := 0 // windows rejected in a row: two end the search (one may be chance)
	for m := minWindow; miss < 2; m = m*3/2 + 1 {
		lo, hi := c-m, c+m
		last := lo < 0 || hi >= len(u)
		if last {
			// Use what is left on the short side once, then stop.
			lo, hi = max(lo, 0), min(hi, len(u)-1)
			if hi-lo < 2*minWindow {
				return best, ok
			}
		}
		// The noise over at least ±noiseSpan samples: fewer give too
		// uncertain an estimate to judge a window by.
		nlo, nhi := max(0, min(lo, c-noiseSpan)), min(len(u)-1, max(hi, c+noiseSpan))
		s2 := interpNoise(u[nlo:nhi+1], v[nlo:nhi+1])
		if !(s2 > 0) {
			return best, ok
		}
		q, fit := fitQuad(u, v, lo, hi)
		if fit && accepts(q, s2) {
			best, ok, miss = q, true, 0
		} else {
			miss++
		}
		if last {
			return best, ok
		}
	}
	return best, ok
}

// interpAt interpolates v linearly at u0 between the samples around it
// (u ascending), clamped to the ends.
func interpAt(u, v []float64, u0 float64) float64 {
	n := len(u)
	if n == 0 {
		return nan()
	}
	if u0 <= u[0] {
		return v[0]
	}
	lo, hi := 0, n-1
	for hi-lo > 1 {
		mid := (lo + hi) / 2
		if u[mid] <= u0 {
			lo = mid
		} else {
			hi = mid
		}
	}
	if u0 >= u[hi] {
		return v[hi]
	}
	d := u[hi] - u[lo]
	if !(d > 0) {
		return v[lo]
	}
	f := (u0 - u[lo]) / d
	return v[lo] + f*(v[hi]-v[lo])
}

// quadRoot returns u where the parabola reaches x0, the root nearest uNear
// within the fitted range, or NaN.
func quadRoot(q quad, x0, uNear float64) float64 {
	c0, c1, c2 := q.c[0]-x0, q.c[1], q.c[2]
	var roots []float64
	if math.Abs(c2) < 1e-12*math.Abs(c1) {
		if c1 != 0 {
			roots = append(roots, -c0/c1)
		}
	} else if d := c1*c1 - 4*c2*c0; d >= 0 {
		sq := math.Sqrt(d)
		qq := -0.5 * (c1 + math.Copysign(sq, c1))
		roots = append(roots, qq/c2)
		if qq != 0 {
			roots = append(roots, c0/qq)
		}
	}
	best := nan()
	for _, x := range roots {
		u := q.uc + x*q.scale
		if u < q.lo || u > q.hi {
			continue
		}
		if math.IsNaN(best) || math.Abs(u-uNear) < math.Abs(best-uNear) {
			best = u
		}
	}
	return best
}

// Between two samples of smooth data, the cubic through the four samples
// around them (Lagrange, in time) follows the curve to fourth order in the
// spacing where the straight line follows it to second order; it is used to
// refine a linear reading on smooth data only, and never leaves the range
// of the two samples where the four are monotone.

// cubic4 evaluates at x the Lagrange cubic through (u[k], v[k]), k = j−1..j+2.
func cubic4(u, v []float64, j int, x float64) float64 {
	s := 0.0
	for k := j - 1; k <= j+2; k++ {
		w := 1.0
		for m := j - 1; m <= j+2; m++ {
			if m != k {
				w *= (x - u[m]) / (u[k] - u[m])
			}
		}
		s += w * v[k]
	}
	return s
}

// jump reports whether the step of v between samples j and j+1 is out of
// proportion with the steps on either side (more than 4 times the larger,
// or 16 times the smaller): a jump, such as J switching in a square loop,
// which no cubic through the four samples follows.
func jump(v []float64, j int) bool {
	d1, d2, d3 := math.Abs(v[j]-v[j-1]), math.Abs(v[j+1]-v[j]), math.Abs(v[j+2]-v[j+1])
	return d2 > 4*math.Max(d1, d3) || d2 > 16*math.Min(d1, d3)
}

// monotone4 reports whether v[j−1..j+2] is strictly monotone.
func monotone4(v []float64, j int) bool {
	up := v[j] > v[j-1] && v[j+1] > v[j] && v[j+2] > v[j+1]
	down := v[j] < v[j-1] && v[j+1] < v[j] && v[j+2] < v[j+1]
	return up || down
}

// cubicCross refines the crossing of x through x0 between samples j and
// j+1 (which bracket it) on the cubics of x(u) and y(u), returning u and y;
// ok is false when the four samples of x are not monotone or not all
// present.
func cubicCross(u, x, y []float64, j int, x0 float64) (float64, float64, bool) {
	if j < 1 || j+2 >= len(u) || !monotone4(x, j) || jump(x, j) || jump(y, j) {
		return 0, 0, false
	}
	a, b := u[j], u[j+1]
	fa := x[j] - x0
	if fa == 0 {
		return a, y[j], true
	}
	for range 60 {
		m := (a + b) / 2
		fm := cubic4(u, x, j, m) - x0
		if fm == 0 {
			a, b = m, m
			break
		}
		if (fm < 0) == (fa < 0) {
			a, fa = m, fm
		} else {
			b = m
		}
	}
	um := (a + b) / 2
	yv := cubic4(u, y, j, um)
	if monotone4(y, j) {
		lo, hi := math.Min(y[j], y[j+1]), math.Max(y[j], y[j+1])
		yv = math.Max(lo, math.Min(hi, yv))
	}
	return um, yv, true
}
