package loop

import (
	"errors"
	"fmt"
	"math"

	"hystd/calib/uncert"
	"hystd/calib/units"
)

// Figure names, as stored with a loop (SI units).
const (
	FigHmax       = "Hmax"       // A/m, tip field, mean of |H| at both tips
	FigBmax       = "Bmax"       // T, B at the tips, mean of both
	FigBr         = "Br"         // T, B at H = 0
	FigHcB        = "HcB"        // A/m, |H| at B = 0
	FigHcJ        = "HcJ"        // A/m, |H| at J = 0
	FigMuA        = "mu_a"       // amplitude permeability Bmax/(μ0·Hmax)
	FigMuInitial  = "mu_initial" // B/(μ0·H) on the initial curve at a low B
	FigMuMax      = "mu_max"     // maximum of B/(μ0·H) along the normal curve
	FigLossJM3    = "loss_j_m3"  // ∮H dB per cycle, J/m³
	FigLossJKg    = "loss_j_kg"  // loss per cycle per mass, J/kg
	FigBHmax      = "BHmax"      // J/m³, 2nd-quadrant maximum of −B·H
	FigBHmaxB     = "BHmax_B"    // T, B at the (BH)max point
	FigBHmaxH     = "BHmax_H"    // A/m, |H| at the (BH)max point
	FigHk         = "Hk"         // A/m, |H| where J = 0.9·Jr in the 2nd quadrant
	FigSquareness = "squareness" // Hk/HcJ
	FigMuRec      = "mu_rec"     // relative slope dB/dH/μ0 near Br (recoil permeability from the major loop)
)

// Units of the figures.
var Units = map[string]string{
	FigHmax: "A/m", FigBmax: "T", FigBr: "T", FigHcB: "A/m", FigHcJ: "A/m", FigMuA: "",
	FigMuInitial: "", FigMuMax: "", FigLossJM3: "J/m3", FigLossJKg: "J/kg", FigBHmax: "J/m3",
	FigBHmaxB: "T", FigBHmaxH: "A/m", FigHk: "A/m", FigSquareness: "", FigMuRec: "",
}

// order is the order in which figures are returned.
var order = []string{FigHmax, FigBmax, FigBr, FigHcB, FigHcJ, FigMuA, FigMuInitial, FigLossJM3, FigLossJKg,
	FigBHmax, FigBHmaxB, FigBHmaxH, FigHk, FigSquareness, FigMuRec}

// Source is one input of the uncertainty budget, described by the change of
// the corrected H and B that one standard uncertainty of it causes:
// H → H·(1+HScale) + HShift and
// B → B·(1+BScale) + BShift + BT1·(t−T0) + BT2·(t−T0)², t and T0 in s on
// the time base of the t passed to Figures.
type Source struct {
	Name           string
	HScale, HShift float64
	BScale, BShift float64
	BT1, BT2, T0   float64
	Note           string
}

// Options select and parameterize the figures.
type Options struct {
	// MuInitialB is the flux density in T at which μ_initial is read on the
	// initial curve; 0 disables μ_initial.
	MuInitialB float64
	// InitialCurve says the first segment starts from a demagnetized state
	// (only then is μ_initial evaluated).
	InitialCurve bool
	// Density in kg/m³ for the loss per mass; 0 omits it.
	Density float64
	// Sources are the inputs whose uncertainties enter every budget besides
	// noise and sampling, which are always evaluated.
	Sources []Source
}

// Figure is one computed figure with its budget.
type Figure struct {
	Name   string
	Unit   string
	Value  float64
	U      float64 // expanded, k = 2
	Budget uncert.Budget
	Note   string
}

// ErrNoBranch is returned when no complete branch (tip to tip) exists.
var ErrNoBranch = errors.New("no complete branch from one tip to the other")

type acc struct{ n, h, b, t, t2 float64 }

func (a *acc) add(h, b, t float64) {
	a.n++
	a.h += h
	a.b += b
	a.t += t
	a.t2 += t * t
}

func (a *acc) merge(o acc) {
	a.n += o.n
	a.h += o.h
	a.b += o.b
	a.t += o.t
	a.t2 += o.t2
}

type pt struct{ h, b, t, t2 float64 }

type curve struct {
	dir  int
	bins [nSub][]acc // by sample index mod nSub
	all  []acc       // the sum of the subsets
}

type tipAcc struct {
	top bool
	a   [nSub]acc
}

// variant says how a curve is read: all samples or one parity, full or half
// bin resolution, with or without a perturbation.
type variant struct {
	parity int // -1: all; 0..nSub-1: the samples of that index mod nSub
	half   bool
	src    *Source
}

type analysis struct {
	lo, scale float64
	nb        int
	t0        float64
	branches  []curve
	cycles    [][2]int // indices into branches
	tips      []tipAcc
	initial   *rawCurve
	loc       local
	recoil    *rawCurve // recoil pieces after a complete falling branch
	opt       Options
}

// Figures computes every figure the data allow, in a fixed order (see the
// Fig constants), with budgets. t (s) may be nil when times are unknown
// (drift sources are then ignored). h and b are corrected H (A/m) and B (T);
// s is their shape from Detect. Figures that cannot be read (no zero
// crossing, no second quadrant, no full cycle) are left out.
func Figures(t, h, b []float64, s Shape, opt Options) ([]Figure, error) {
	if len(h) != s.N || len(b) != s.N || t != nil && len(t) != s.N {
		return nil, fmt.Errorf("loop: %d H, %d B, %d t values for a shape of %d samples", len(h), len(b), len(t), s.N)
	}
	a, err := build(t, h, b, s, opt)
	if err != nil {
		return nil, err
	}
	nom := a.eval(variant{parity: -1})
	var subs [nSub]vals
	for k := range subs {
		subs[k] = a.eval(variant{parity: k})
	}
	half := a.eval(variant{parity: -1, half: true})
	srcs := make([]vals, len(opt.Sources))
	for i := range opt.Sources {
		src := opt.Sources[i]
		src.T0 -= a.t0 // the bins keep times relative to the first sample
		srcs[i] = a.eval(variant{parity: -1, src: &src})
	}
	// The loss is integrated on the samples themselves; the bins serve the budget.
	rawLoss := loss(h, b, s, -1)
	var subLoss [nSub]float64
	for k := range subLoss {
		subLoss[k] = loss(h, b, s, k)
	}
	rawLossNoise := scatter(subLoss[:])
	tipBand := tipFraction * (s.Hi - s.Lo)
	tips := s.Tips(t, h, b)

	var out []Figure
	for _, name := range order {
		v := nom[name]
		if name == FigLossJM3 || name == FigLossJKg {
			if math.IsNaN(v) || math.IsNaN(rawLoss) {
				continue
			}
			if name == FigLossJM3 {
				v = rawLoss
			} else {
				v = rawLoss / opt.Density
			}
		}
		if math.IsNaN(v) {
			continue
		}
		f := Figure{Name: name, Unit: Units[name], Value: v}
		if name == FigLossJM3 || name == FigLossJKg {
			// The loss is integrated on the samples: so is its noise.
			u := rawLossNoise
			if name == FigLossJKg {
				u /= opt.Density
			}
			f.Budget.Add("noise", u, "Type A: scatter of the integrals over the 4 interleaved subsets of samples, s/√4")
		} else {
			f.Budget.Add("noise", subScatter(subs, name), "Type A: scatter of the results from the 4 interleaved subsets of samples, s/√4")
		}
		f.Budget.Add("sampling", math.Abs(nom[name]-half[name])/math.Sqrt(3), "Type B: change at half the bin resolution taken as a rectangular half-width")
		switch name {
		case FigHmax:
			f.Budget.Add("tip averaging", tipBand/(2*math.Sqrt(3)), "Type B: H band averaged at each tip, rectangular")
			f.Budget.Add("tip scatter", tipScatter(tips, func(tp Tip) float64 { return tp.H }), "Type A: scatter of the tips about their mean")
		case FigBmax:
			f.Budget.Add("tip scatter", tipScatter(tips, func(tp Tip) float64 { return tp.B }), "Type A: scatter of the tips about their mean")
		case FigMuA:
			f.Budget.Add("tip averaging", v*tipBand/(2*math.Sqrt(3))/nom[FigHmax], "Type B: from the Hmax tip band")
		}
		for i, src := range opt.Sources {
			f.Budget.Add(src.Name, math.Abs(srcs[i][name]-nom[name]), src.Note)
		}
		f.U = f.Budget.Expanded()
		f.Note = notes[name]
		out = append(out, f)
	}
	return out, nil
}

var notes = map[string]string{
	FigHmax:       "mean of |H| at the tips (samples within 0.02 % of the H range of each tip)",
	FigBmax:       "half the difference of B at the top and bottom tips",
	FigBr:         "B at H = 0, interpolated, magnitudes averaged over both branches",
	FigHcB:        "H at B = 0, interpolated, magnitudes averaged over both branches",
	FigHcJ:        "H at J = B − μ0·H = 0, interpolated, magnitudes averaged over both branches",
	FigMuA:        "Bmax/(μ0·Hmax)",
	FigMuInitial:  "B/(μ0·H) on the initial curve at the configured B",
	FigLossJM3:    "∮H dB per full cycle on the samples (trapezoid), mean over cycles",
	FigLossJKg:    "loss per cycle divided by the density",
	FigBHmax:      "2nd-quadrant maximum of −B·H on the falling branches, interpolated between bins",
	FigBHmaxB:     "B at the (BH)max point",
	FigBHmaxH:     "|H| at the (BH)max point",
	FigHk:         "|H| where J = 0.9·Jr on the falling branch (Jr = J at H = 0)",
	FigSquareness: "Hk/HcJ",
	FigMuRec:      "least-squares slope dB/dH/μ0 of the recoil pieces when recorded, else of the falling branch between H = 0 and Hk/2 (major-loop estimate)",
}

// nSub is the number of interleaved subsets of samples (index mod nSub)
// whose results give the Type A noise estimate: with white noise, the
// result of one subset varies nSub times as much as the result of all
// samples, so u = s/√nSub with s the standard deviation of the subsets'
// results (nSub − 1 degrees of freedom).
const nSub = 4

// scatter returns s/√n of the finite values, NaN with fewer than two.
func scatter(x []float64) float64 {
	var n, m float64
	for _, v := range x {
		if !math.IsNaN(v) {
			n++
			m += v
		}
	}
	if n < 2 {
		return nan()
	}
	m /= n
	ss := 0.0
	for _, v := range x {
		if !math.IsNaN(v) {
			ss += (v - m) * (v - m)
		}
	}
	return math.Sqrt(ss/(n-1)) / math.Sqrt(n)
}

func subScatter(subs [nSub]vals, name string) float64 {
	var x [nSub]float64
	for k := range subs {
		x[k] = subs[k][name]
	}
	return scatter(x[:])
}

// tipScatter returns the standard uncertainty of (mean top − mean bottom)/2
// from the pooled scatter of the tips about the mean of their kind, or 0
// with fewer than three tips.
func tipScatter(tips []Tip, val func(Tip) float64) float64 {
	var st, sb float64
	var nt, nb float64
	for _, tp := range tips {
		if tp.Top {
			st += val(tp)
			nt++
		} else {
			sb += val(tp)
			nb++
		}
	}
	if nt == 0 || nb == 0 || nt+nb < 3 {
		return 0
	}
	mt, mb := st/nt, sb/nb
	ss := 0.0
	for _, tp := range tips {
		d := val(tp) - mb
		if tp.Top {
			d = val(tp) - mt
		}
		ss += d * d
	}
	s2 := ss / (nt + nb - 2)
	return 0.5 * math.Sqrt(s2/nt+s2/nb)
}

func build(t, h, b []float64, s Shape, opt Options) (*analysis, error) {
	comp := s.Complete()
	if len(comp) == 0 {
		return nil, ErrNoBranch
	}
	span := s.Hi - s.Lo
	total := 0
	for _, g := range comp {
		total += g.End - g.Start + 1
	}
	nb := total / len(comp) / 4
	nb = max(8, min(4096, nb))
	nb += nb % 2
	a := &analysis{lo: s.Lo, scale: float64(nb) / span, nb: nb, opt: opt}
	if t != nil {
		a.t0 = t[0]
	}
	tm := func(i int) float64 {
		if t == nil {
			return float64(i)
		}
		return t[i] - a.t0
	}
	a.loc = local{h: h, b: b, tm: tm}
	idxOf := map[int]int{}
	for k, g := range s.Segments {
		if !g.Complete && !(g.Initial && opt.InitialCurve) {
			continue
		}
		c := curve{dir: g.Dir}
		if g.Complete {
			for q := range c.bins {
				c.bins[q] = make([]acc, nb)
			}
			for i := g.Start; i <= g.End; i++ {
				j := int((h[i] - a.lo) * a.scale)
				j = max(0, min(nb-1, j))
				c.bins[i%nSub][j].add(h[i], b[i], tm(i))
			}
			c.all = make([]acc, nb)
			for j := range c.all {
				for q := range c.bins {
					c.all[j].merge(c.bins[q][j])
				}
			}
		}
		if g.Complete {
			idxOf[k] = len(a.branches)
			a.branches = append(a.branches, c)
			a.loc.addBranch(g.Start, g.End)
		} else {
			rc := &rawCurve{dir: g.Dir, h: h[g.Start : g.End+1], b: b[g.Start : g.End+1], start: g.Start}
			rc.t = make([]float64, len(rc.h))
			for i := range rc.t {
				rc.t[i] = tm(g.Start + i)
			}
			a.initial = rc
		}
	}
	// Recoil pieces: incomplete segments after a complete falling branch
	// (a recoil loop from a point of the demagnetization curve).
	for k, g := range s.Segments {
		if !g.Complete || g.Dir != Falling || k+1 >= len(s.Segments) {
			continue
		}
		rest := s.Segments[k+1:]
		first, last := rest[0].Start, rest[len(rest)-1].End
		ok := true
		for _, r := range rest {
			ok = ok && !r.Complete
		}
		if ok && last-first >= 4 {
			rc := &rawCurve{dir: Rising, h: h[first : last+1], b: b[first : last+1], start: first}
			rc.t = make([]float64, len(rc.h))
			for i := range rc.t {
				rc.t[i] = tm(first + i)
			}
			a.recoil = rc
		}
		break
	}
	for k := 0; k+1 < len(s.Segments); k++ {
		x, y := s.Segments[k], s.Segments[k+1]
		if x.Complete && y.Complete && x.Dir != y.Dir {
			a.cycles = append(a.cycles, [2]int{idxOf[k], idxOf[k+1]})
			k++
		}
	}
	band := tipFraction * span
	for _, tp := range s.Tips(t, h, b) {
		ta := tipAcc{top: tp.Top}
		i := tp.Index
		in := func(j int) bool {
			if tp.Top {
				return h[i]-h[j] <= band
			}
			return h[j]-h[i] <= band
		}
		for j := i; j >= 0 && in(j); j-- {
			ta.a[j%nSub].add(h[j], b[j], tm(j))
		}
		for j := i + 1; j < len(h) && in(j); j++ {
			ta.a[j%nSub].add(h[j], b[j], tm(j))
		}
		a.tips = append(a.tips, ta)
	}
	return a, nil
}

// apply maps bin means through a variant's perturbation.
func (v variant) apply(p pt) pt {
	s := v.src
	if s == nil {
		return p
	}
	h := p.h*(1+s.HScale) + s.HShift
	b := p.b*(1+s.BScale) + s.BShift
	if s.BT1 != 0 || s.BT2 != 0 {
		b += s.BT1*(p.t-s.T0) + s.BT2*(p.t2-2*s.T0*p.t+s.T0*s.T0)
	}
	return pt{h: h, b: b, t: p.t, t2: p.t2}
}

func (v variant) mean(a acc) (pt, bool) {
	if a.n == 0 {
		return pt{}, false
	}
	return v.apply(pt{h: a.h / a.n, b: a.b / a.n, t: a.t / a.n, t2: a.t2 / a.n}), true
}

func (v variant) pick(all [nSub]acc) acc {
	if v.parity >= 0 {
		return all[v.parity]
	}
	var x acc
	for _, a := range all {
		x.merge(a)
	}
	return x
}

// points returns the curve's bin means in ascending H.
func (c curve) points(v variant, dst []pt) []pt {
	if cap(dst) < len(c.bins[0]) {
		dst = make([]pt, 0, len(c.bins[0]))
	}
	dst = dst[:0]
	step := 1
	if v.half {
		step = 2
	}
	src := c.all
	if v.parity >= 0 {
		src = c.bins[v.parity]
	}
	for j := 0; j < len(src); j += step {
		x := src[j]
		if step == 2 && j+1 < len(src) {
			x.merge(src[j+1])
		}
		if p, ok := v.mean(x); ok {
			dst = append(dst, p)
		}
	}
	return dst
}

type vals map[string]float64

func nan() float64 { return math.NaN() }

func (a *analysis) eval(v variant) vals {
	out := vals{}
	for _, n := range order {
		out[n] = nan()
	}
	// Tips.
	var top, bot, nt, nbt float64
	var topB, botB float64
	for _, ta := range a.tips {
		x := v.pick(ta.a)
		if x.n == 0 { // a narrow tip lacks this subset: fall back to all samples
			x = variant{parity: -1}.pick(ta.a)
		}
		p, _ := v.mean(x)
		if ta.top {
			top += p.h
			topB += p.b
			nt++
		} else {
			bot += p.h
			botB += p.b
			nbt++
		}
	}
	if nt > 0 && nbt > 0 {
		out[FigHmax] = (top/nt - bot/nbt) / 2
		out[FigBmax] = (topB/nt - botB/nbt) / 2
		out[FigMuA] = out[FigBmax] / (units.Mu0 * out[FigHmax])
	}
	var br, hcb, hcj []float64
	var bh, bhB, bhH, hk, murec []float64
	pts := make([][]pt, len(a.branches))
	for k, c := range a.branches {
		p := c.points(v, nil)
		pts[k] = p
		// Crossings on the samples; the bins are the fallback.
		xbr, xhcb, xhcj, xhk := a.loc.crossings(k, v, c.dir == Falling)
		if math.IsNaN(xbr) {
			xbr = interpH0(p)
		}
		if math.IsNaN(xhcb) {
			xhcb = crossB(p, func(q pt) float64 { return q.b })
		}
		if math.IsNaN(xhcj) {
			xhcj = crossB(p, func(q pt) float64 { return q.b - units.Mu0*q.h })
		}
		if !math.IsNaN(xbr) {
			br = append(br, math.Abs(xbr))
		}
		if !math.IsNaN(xhcb) {
			hcb = append(hcb, math.Abs(xhcb))
		}
		if !math.IsNaN(xhcj) {
			hcj = append(hcj, math.Abs(xhcj))
		}
		if c.dir == Falling {
			if m, mb, mh := bhMax(p); m > 0 {
				bh, bhB, bhH = append(bh, m), append(bhB, mb), append(bhH, math.Abs(mh))
			}
			kb, mu := kneeAndRecoil(p, xhk)
			if !math.IsNaN(xhk) && xhk < 0 {
				kb = -xhk
			}
			if !math.IsNaN(kb) {
				hk = append(hk, kb)
			}
			if !math.IsNaN(mu) {
				murec = append(murec, mu)
			}
		}
	}
	out[FigBr], out[FigHcB], out[FigHcJ] = meanOf(br), meanOf(hcb), meanOf(hcj)
	out[FigBHmax], out[FigBHmaxB], out[FigBHmaxH] = meanOf(bh), meanOf(bhB), meanOf(bhH)
	out[FigHk], out[FigMuRec] = meanOf(hk), meanOf(murec)
	if len(hk) > 0 && out[FigHcJ] > 0 {
		out[FigSquareness] = out[FigHk] / out[FigHcJ]
	}
	var w []float64
	for _, cy := range a.cycles {
		w = append(w, polygonLoss(pts[cy[0]], pts[cy[1]], a.branches[cy[0]].dir))
	}
	out[FigLossJM3] = meanOf(w)
	if a.opt.Density > 0 {
		out[FigLossJKg] = out[FigLossJM3] / a.opt.Density
	}
	if a.initial != nil && a.opt.MuInitialB > 0 {
		out[FigMuInitial] = a.initial.muInitial(v, a.opt.MuInitialB)
	}
	if a.recoil != nil {
		if mu := a.recoil.slope(v); !math.IsNaN(mu) {
			out[FigMuRec] = mu
		}
	}
	return out
}

func meanOf(x []float64) float64 {
	if len(x) == 0 {
		return nan()
	}
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s / float64(len(x))
}

// interpH0 returns B at H = 0 on points in ascending H.
func interpH0(p []pt) float64 {
	for i := 0; i+1 < len(p); i++ {
		if p[i].h <= 0 && p[i+1].h > 0 {
			f := -p[i].h / (p[i+1].h - p[i].h)
			return p[i].b + f*(p[i+1].b-p[i].b)
		}
	}
	return nan()
}

// crossB returns H where y(p) crosses 0 (median crossing when noise makes
// several), interpolated linearly between points.
func crossB(p []pt, y func(pt) float64) float64 {
	var xs []float64
	for i := 0; i+1 < len(p); i++ {
		y0, y1 := y(p[i]), y(p[i+1])
		if y0 <= 0 && y1 > 0 || y0 >= 0 && y1 < 0 {
			if y0 == y1 {
				continue
			}
			f := y0 / (y0 - y1)
			xs = append(xs, p[i].h+f*(p[i+1].h-p[i].h))
		}
	}
	if len(xs) == 0 {
		return nan()
	}
	return xs[len(xs)/2]
}

// bhMax maximizes −B·H over the piecewise-linear curve in the 2nd quadrant
// (H ≤ 0, B ≥ 0): on each piece the product is a quadratic in the piece
// parameter, maximized exactly. The maximum is then refined by a
// least-squares parabola of the product against H over the points within
// 5 % of it, which locates the operating point without following the noise.
func bhMax(p []pt) (m, atB, atH float64) {
	for i := 0; i+1 < len(p); i++ {
		h0, b0 := p[i].h, p[i].b
		dh, db := p[i+1].h-h0, p[i+1].b-b0
		if h0 > 0 && p[i+1].h > 0 {
			break
		}
		// f(s) = −(h0 + s·dh)(b0 + s·db) = −h0·b0 − s(h0·db + b0·dh) − s²·dh·db
		cand := []float64{0, 1}
		if q := dh * db; q != 0 {
			if s := -(h0*db + b0*dh) / (2 * q); s > 0 && s < 1 {
				cand = append(cand, s)
			}
		}
		for _, s := range cand {
			h, b := h0+s*dh, b0+s*db
			if h <= 0 && b >= 0 && -h*b > m {
				m, atB, atH = -h*b, b, h
			}
		}
	}
	if m <= 0 {
		return m, atB, atH
	}
	// Parabola P = c0 + c1·x + c2·x² in x = H/|atH| over the top 5 %.
	var s [5]float64 // Σx⁰..x⁴
	var r [3]float64 // ΣP·x⁰..x²
	lo, hi, n := math.Inf(1), math.Inf(-1), 0
	for _, q := range p {
		if q.h > 0 || q.b < 0 {
			continue
		}
		pv := -q.h * q.b
		if pv < 0.95*m {
			continue
		}
		x := q.h / -atH
		xp := 1.0
		for k := 0; k < 5; k++ {
			s[k] += xp
			if k < 3 {
				r[k] += pv * xp
			}
			xp *= x
		}
		lo, hi, n = math.Min(lo, x), math.Max(hi, x), n+1
	}
	if n < 5 {
		return m, atB, atH
	}
	c, ok := solve3([3][3]float64{{s[0], s[1], s[2]}, {s[1], s[2], s[3]}, {s[2], s[3], s[4]}}, r)
	if !ok || !(c[2] < 0) {
		return m, atB, atH
	}
	xv := -c[1] / (2 * c[2])
	if xv < lo || xv > hi {
		return m, atB, atH
	}
	pv := c[0] + c[1]*xv + c[2]*xv*xv
	hv := xv * -atH
	return pv, pv / -hv, hv
}

// solve3 solves a 3×3 linear system by Cramer's rule.
func solve3(a [3][3]float64, r [3]float64) ([3]float64, bool) {
	det := func(m [3][3]float64) float64 {
		return m[0][0]*(m[1][1]*m[2][2]-m[1][2]*m[2][1]) - m[0][1]*(m[1][0]*m[2][2]-m[1][2]*m[2][0]) +
			m[0][2]*(m[1][0]*m[2][1]-m[1][1]*m[2][0])
	}
	d := det(a)
	if d == 0 || math.IsNaN(d) {
		return [3]float64{}, false
	}
	var out [3]float64
	for k := 0; k < 3; k++ {
		m := a
		for i := 0; i < 3; i++ {
			m[i][k] = r[i]
		}
		out[k] = det(m) / d
	}
	return out, true
}

// kneeAndRecoil reads Hk (|H| where J falls to 0.9·Jr, going from H = 0
// towards negative H) and the relative slope of B near Br from a falling
// branch in ascending H.
func kneeAndRecoil(p []pt, hkSamples float64) (hk, murec float64) {
	hk, murec = nan(), nan()
	i0 := -1
	for i := 0; i+1 < len(p); i++ {
		if p[i].h <= 0 && p[i+1].h > 0 {
			i0 = i
			break
		}
	}
	if i0 < 0 {
		return
	}
	j := func(q pt) float64 { return q.b - units.Mu0*q.h }
	f := -p[i0].h / (p[i0+1].h - p[i0].h)
	jr := j(p[i0]) + f*(j(p[i0+1])-j(p[i0]))
	if !(jr > 0) {
		return
	}
	lvl := 0.9 * jr
	for i := i0; i > 0; i-- {
		a, b := j(p[i]), j(p[i-1])
		if a >= lvl && b < lvl {
			g := (a - lvl) / (a - b)
			hk = -(p[i].h + g*(p[i-1].h-p[i].h))
			break
		}
	}
	if hkSamples < 0 {
		hk = -hkSamples
	}
	// Least-squares slope of B on H over H in [−reach, 0].
	reach := hk / 2
	if math.IsNaN(reach) {
		if hc := crossB(p, func(q pt) float64 { return q.b }); !math.IsNaN(hc) {
			reach = math.Abs(hc) / 4
		} else {
			return
		}
	}
	var n, sh, sb, shh, shb float64
	for i := i0 + 1; i >= 0; i-- {
		if p[i].h > 0 {
			continue
		}
		if p[i].h < -reach {
			break
		}
		n++
		sh += p[i].h
		sb += p[i].b
		shh += p[i].h * p[i].h
		shb += p[i].h * p[i].b
	}
	if n >= 3 {
		den := n*shh - sh*sh
		if den > 0 {
			murec = (n*shb - sh*sb) / den / units.Mu0
		}
	}
	return
}

// polygonLoss is ∮H dB around the closed polygon of one cycle: the first
// branch traversed in its own direction, then the second, then closed.
func polygonLoss(first, second []pt, firstDir int) float64 {
	path := make([]pt, 0, len(first)+len(second)+1)
	appendDir := func(p []pt, dir int) {
		if dir == Rising {
			path = append(path, p...)
		} else {
			for i := len(p) - 1; i >= 0; i-- {
				path = append(path, p[i])
			}
		}
	}
	appendDir(first, firstDir)
	appendDir(second, -firstDir)
	if len(path) < 3 {
		return nan()
	}
	path = append(path, path[0])
	w := 0.0
	for i := 0; i+1 < len(path); i++ {
		w += (path[i].h + path[i+1].h) / 2 * (path[i+1].b - path[i].b)
	}
	return w
}

// loss integrates ∮H dB with the trapezoid rule over each full cycle of the
// samples (closing each cycle with a straight piece) and returns the mean
// over cycles, or NaN without a full cycle. parity 0..nSub−1 uses only the
// samples of that index mod nSub (for the noise estimate), −1 all.
func loss(h, b []float64, s Shape, parity int) float64 {
	var w []float64
	for _, cy := range s.Cycles() {
		i0, i1 := cy[0].Start, cy[1].End
		step := 1
		if parity >= 0 {
			i0 += ((parity-i0)%nSub + nSub) % nSub
			step = nSub
		}
		if i1-i0 < 2*step {
			continue
		}
		sum, last := 0.0, i0
		for i := i0; i+step <= i1; i += step {
			sum += (h[i] + h[i+step]) / 2 * (b[i+step] - b[i])
			last = i + step
		}
		sum += (h[last] + h[i0]) / 2 * (b[i0] - b[last])
		w = append(w, sum)
	}
	return meanOf(w)
}

// slope returns the least-squares slope dB/dH/μ0 over the samples.
func (c *rawCurve) slope(v variant) float64 {
	var n, sh, sb, shh, shb float64
	for i := range c.h {
		if v.parity >= 0 && (c.start+i)%nSub != v.parity {
			continue
		}
		p := v.apply(pt{h: c.h[i], b: c.b[i], t: c.t[i], t2: c.t[i] * c.t[i]})
		n++
		sh += p.h
		sb += p.b
		shh += p.h * p.h
		shb += p.h * p.b
	}
	den := n*shh - sh*sh
	if n < 3 || !(den > 0) {
		return nan()
	}
	return (n*shb - sh*sb) / den / units.Mu0
}

// rawCurve is the initial curve kept as samples: μ_initial is read at a
// low B, where bins spread over the whole H range would be too coarse.
type rawCurve struct {
	dir     int
	start   int // index of the first sample, for the parity
	t, h, b []float64
}

// muInitial reads B/(μ0·H) where the initial curve reaches |B| = level: H
// at that level is the least-squares line H = α + β·(B − level) through the
// samples with |B| within ±50 % of the level (±75 % at the coarser
// "sampling" variant), or the interpolation between the two samples that
// bracket it when fewer than 3 samples lie there.
func (c *rawCurve) muInitial(v variant, level float64) float64 {
	w := 0.5
	if v.half {
		w = 0.75
	}
	sign := 1.0
	if c.dir == Falling {
		sign = -1
	}
	var n, sx, sy, sxx, sxy float64
	prevB, prevH := math.NaN(), math.NaN()
	bracket := math.NaN()
	for i := range c.h {
		if v.parity >= 0 && (c.start+i)%nSub != v.parity {
			continue
		}
		p := v.apply(pt{h: c.h[i], b: c.b[i], t: c.t[i], t2: c.t[i] * c.t[i]})
		hh, bb := sign*p.h, sign*p.b
		if math.IsNaN(bracket) && prevB < level && bb >= level {
			bracket = prevH + (level-prevB)/(bb-prevB)*(hh-prevH)
		}
		prevB, prevH = bb, hh
		if bb < (1-w)*level || bb > (1+w)*level {
			continue
		}
		x := bb - level
		n++
		sx += x
		sy += hh
		sxx += x * x
		sxy += x * hh
	}
	hAt := bracket
	if n >= 3 {
		if den := n*sxx - sx*sx; den > 0 {
			beta := (n*sxy - sx*sy) / den
			hAt = (sy - beta*sx) / n
		}
	}
	if !(hAt > 0) {
		return nan()
	}
	return level / (units.Mu0 * hAt)
}
