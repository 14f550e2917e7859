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
	FigHmax      = "Hmax"       // A/m, tip field, mean of |H| at both tips
	FigBmax      = "Bmax"       // T, B at the tips, mean of both
	FigBr        = "Br"         // T, B at H = 0
	FigHcB       = "HcB"        // A/m, |H| at B = 0
	FigHcJ       = "HcJ"        // A/m, |H| at J = 0
	FigMuA       = "mu_a"       // amplitude permeability Bmax/(μ0·Hmax)
	FigMuInitial = "mu_initial" // B/(μ0·H) on the initial curve at a low B
	FigMuMax     = "mu_max"     // maximum of B/(μ0·H) along the normal curve
	FigHMuMax    = "H_mu_max"   // A/m, H at μ_max on the normal curve
	// FigDriveAmplitude is the amplitude a peak search settled on (A, or
	// A/m under field control); FigPeakTarget the peak B or J aimed at, T.
	FigDriveAmplitude = "drive_amplitude"
	FigPeakTarget     = "peak_target"
	FigLossJM3        = "loss_j_m3"  // ∮H dB per cycle, J/m³
	FigLossJKg        = "loss_j_kg"  // loss per cycle per mass, J/kg
	FigBHmax          = "BHmax"      // J/m³, 2nd-quadrant maximum of −B·H
	FigBHmaxB         = "BHmax_B"    // T, B at the (BH)max point
	FigBHmaxH         = "BHmax_H"    // A/m, |H| at the (BH)max point
	FigHk             = "Hk"         // A/m, |H| where J = 0.9·Jr in the 2nd quadrant
	FigSquareness     = "squareness" // Hk/HcJ
	FigMuRec          = "mu_rec"     // relative slope dB/dH/μ0 near Br (recoil permeability from the major loop)
)

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

type pt struct{ h, b, t, t2 float64 }

// variant says how the samples are read: all samples or one parity, all or
// every other sample, with or without a perturbation.
type variant struct {
	parity int // -1: all; 0..nSub-1: the samples of that index mod nSub
	half   bool
	src    *Source
}

// step is the index step between the variant's samples.
func (v variant) step() int {
	switch {
	case v.parity >= 0:
		return nSub
	case v.half:
		return 2
	}
	return 1
}

// from returns the variant's first sample index at or after i.
func (v variant) from(i int) int {
	for !v.keep(i) {
		i++
	}
	return i
}

// keep reports whether sample i belongs to the variant.
func (v variant) keep(i int) bool {
	if v.parity >= 0 {
		return i%nSub == v.parity
	}
	if v.src != nil {
		return true
	}
	return !v.half || i%2 == 0
}

type branch struct {
	start, end, dir int
}

type tipRef struct {
	index  int
	top    bool
	lo, hi int  // samples that may belong to this tip's sides
	last   bool // hi is the last sample of the record
}

type analysis struct {
	t0       float64
	span     float64
	t, h, b  []float64
	s        Shape
	branches []branch
	tips     []tipRef
	initial  *rawCurve
	loc      local
	recoil   *rawCurve // recoil pieces after a complete falling branch
	opt      Options
	nomVar   vals            // noise variances of the nominal readings
	reach    map[int]float64 // nominal recoil range per falling branch
	lossPar  *[nSub]float64  // the loss of each subset, once computed
	lossT    *[3]float64     // ∮h db, ∮h dt, ∮h d(t²) over the cycles (means)
	bhVar    float64         // noise variance of the last bhMax
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
		src.T0 -= a.t0 // times are kept relative to the first sample
		srcs[i] = a.eval(variant{parity: -1, src: &src})
	}
	tips := a.tipsOf(variant{parity: -1})

	var out []Figure
	for _, name := range order {
		v := nom[name]
		if math.IsNaN(v) {
			continue
		}
		f := Figure{Name: name, Unit: Units[name], Value: v}
		switch vr, ok := a.nomVar[name]; {
		case ok && !math.IsNaN(vr):
			f.Budget.Add("noise", math.Sqrt(vr), "Type A: standard error of the local fits (or of the interpolation, with the noise of the samples near the reading), propagated")
		case name == FigLossJM3 || name == FigLossJKg:
			f.Budget.Add("noise", subScatter(subs, name), "Type A: scatter of the integrals over the 16 interleaved subsets of samples, s/√16")
		default:
			f.Budget.Add("noise", subScatter(subs, name), "Type A: scatter of the results from the 16 interleaved subsets of samples, s/√16")
		}
		f.Budget.Add("estimator", math.Abs(nom[name]-half[name])/math.Sqrt(3),
			"Type B: change when every other sample is left out (interpolation error grows 4-fold, a local fit's noise 2-fold), rectangular")
		switch name {
		case FigHmax:
			f.Budget.Add("tip scatter", tipScatter(tips, func(tp Tip) float64 { return tp.H }), "Type A: scatter of the tips about their mean")
		case FigBmax:
			f.Budget.Add("tip scatter", tipScatter(tips, func(tp Tip) float64 { return tp.B }), "Type A: scatter of the tips about their mean")
		case FigMuA:
			uh := tipScatter(tips, func(tp Tip) float64 { return tp.H }) / nom[FigHmax]
			ub := tipScatter(tips, func(tp Tip) float64 { return tp.B }) / nom[FigBmax]
			f.Budget.Add("tip scatter", v*math.Hypot(uh, ub), "Type A: from the scatter of the tips' H and B, propagated")
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
	FigHmax:       "half the difference of H at the top and bottom tips, each the apex of the sweep H(t) (lines on both sides of the tip)",
	FigBmax:       "half the difference of B at the top and bottom tips, read at each apex",
	FigBr:         "B at H = 0 between the samples (interpolated; a local fit where noise dominates), magnitudes averaged over all complete branches",
	FigHcB:        "H at B = 0 between the samples (interpolated; a local fit where noise dominates), magnitudes averaged over all complete branches",
	FigHcJ:        "H at J = B − μ0·H = 0 between the samples (interpolated; a local fit where noise dominates), magnitudes averaged over all complete branches",
	FigMuA:        "Bmax/(μ0·Hmax)",
	FigMuInitial:  "B/(μ0·H) on the initial curve at the configured B",
	FigLossJM3:    "∮H dB per full cycle on the samples (trapezoid), mean over cycles",
	FigLossJKg:    "loss per cycle divided by the density",
	FigBHmax:      "2nd-quadrant maximum of −B·H on the falling branches: exact maximum along the straight pieces between samples (a local fit where noise dominates), mean over complete falling branches",
	FigBHmaxB:     "B at the (BH)max point",
	FigBHmaxH:     "|H| at the (BH)max point",
	FigHk:         "|H| where J = 0.9·Jr on the falling branch (Jr = J at H = 0)",
	FigSquareness: "Hk/HcJ",
	FigMuRec:      "least-squares slope dB/dH/μ0 of the recoil pieces when recorded, else of the samples of the falling branch between H = 0 and Hk/2 (major-loop estimate)",
}

// nSub is the number of interleaved subsets of samples (index mod nSub)
// whose results give the Type A noise estimate: with white noise, the
// result of one subset varies nSub times as much as the result of all
// samples, so u = s/√nSub with s the standard deviation of the subsets'
// results (nSub − 1 degrees of freedom). 16 subsets give 15 degrees of
// freedom, for which k = 2 covers about 94 % (t distribution, GUM G.3);
// 4 subsets (3 degrees of freedom) covered only about 86 %.
const nSub = 16

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
	a := &analysis{span: s.Hi - s.Lo, t: t, h: h, b: b, s: s, opt: opt, reach: map[int]float64{}}
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
	for _, g := range s.Segments {
		if g.Complete {
			a.branches = append(a.branches, branch{start: g.Start, end: g.End, dir: g.Dir})
			a.loc.addBranch(g.Start, g.End, g.Dir)
		} else if g.Initial && opt.InitialCurve {
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
	a.tips = s.tipRefs()
	return a, nil
}

// apply maps a sample through a variant's perturbation.
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

type vals map[string]float64

func nan() float64 { return math.NaN() }

// sample returns sample i through the variant, with its time.
func (a *analysis) sample(v variant, i int) pt {
	tt := a.loc.tm(i)
	return v.apply(pt{h: a.h[i], b: a.b[i], t: tt, t2: tt * tt})
}

// tipsOf reads every tip for a variant.
func (a *analysis) tipsOf(v variant) []Tip {
	out := make([]Tip, 0, len(a.tips))
	for _, r := range a.tips {
		tp := readTip(r, a.loc.tm, func(i int) (float64, float64) { p := a.sample(v, i); return p.h, p.b }, v.keep)
		tp.T += a.t0
		if a.t == nil {
			tp.T = a.loc.tm(r.index) // index time
		}
		out = append(out, tp)
	}
	return out
}

func (a *analysis) eval(v variant) vals {
	out := vals{}
	for _, n := range order {
		out[n] = nan()
	}
	// nv collects the noise variances of the nominal readings (from the
	// local fits and the noise near each reading).
	nv := vals{}
	// A subset of samples (parity) serves only the figures whose noise is
	// not evaluated from the nominal reading's own fit: the tips and the
	// crossings are skipped for it.
	lite := v.parity >= 0
	if !lite {
		a.evalTips(v, out, nv)
	}
	a.evalBranches(v, lite, out, nv)
	if v.parity < 0 && !v.half && v.src == nil {
		a.nomVar = nv
	}
	a.evalWhole(v, out)
	return out
}

// evalTips sets Hmax, Bmax and μa from the tips, with their noise
// variances.
func (a *analysis) evalTips(v variant, out, nv vals) {
	var top, bot, topB, botB, nt, nbt, vt, vb, vtB, vbB float64
	for _, tp := range a.tipsOf(v) {
		if tp.Top {
			top, topB, nt, vt, vtB = top+tp.H, topB+tp.B, nt+1, vt+tp.vH, vtB+tp.vB
		} else {
			bot, botB, nbt, vb, vbB = bot+tp.H, botB+tp.B, nbt+1, vb+tp.vH, vbB+tp.vB
		}
	}
	if nt == 0 || nbt == 0 {
		return
	}
	out[FigHmax] = (top/nt - bot/nbt) / 2
	out[FigBmax] = (topB/nt - botB/nbt) / 2
	out[FigMuA] = out[FigBmax] / (units.Mu0 * out[FigHmax])
	nv[FigHmax] = (vt/(nt*nt) + vb/(nbt*nbt)) / 4
	nv[FigBmax] = (vtB/(nt*nt) + vbB/(nbt*nbt)) / 4
	nv[FigMuA] = out[FigMuA] * out[FigMuA] * (nv[FigBmax]/(out[FigBmax]*out[FigBmax]) + nv[FigHmax]/(out[FigHmax]*out[FigHmax]))
}

// branchReads are the readings of every branch, with their noise
// variances, before they are averaged.
type branchReads struct {
	br, hcb, hcj, bh, bhB, bhH, hk, murec []float64
	vbr, vhcb, vhcj, vbh, vhk             []float64
}

// evalBranches sets the figures read on each branch (Br, HcB, HcJ, and on
// falling branches (BH)max, Hk and μrec near Br), averaged over the
// branches, and the squareness.
func (a *analysis) evalBranches(v variant, lite bool, out, nv vals) {
	var r branchReads
	for k, c := range a.branches {
		a.readBranch(k, c.dir == Falling, v, lite, &r)
	}
	out[FigBr], out[FigHcB], out[FigHcJ] = meanOf(r.br), meanOf(r.hcb), meanOf(r.hcj)
	out[FigBHmax], out[FigBHmaxB], out[FigBHmaxH] = meanOf(r.bh), meanOf(r.bhB), meanOf(r.bhH)
	out[FigHk], out[FigMuRec] = meanOf(r.hk), meanOf(r.murec)
	nv[FigBr], nv[FigHcB], nv[FigHcJ] = varOfMean(r.vbr), varOfMean(r.vhcb), varOfMean(r.vhcj)
	nv[FigBHmax], nv[FigHk] = varOfMean(r.vbh), varOfMean(r.vhk)
	if len(r.hk) > 0 && out[FigHcJ] > 0 {
		out[FigSquareness] = out[FigHk] / out[FigHcJ]
		sq := out[FigSquareness]
		nv[FigSquareness] = sq * sq * (nv[FigHk]/(out[FigHk]*out[FigHk]) + nv[FigHcJ]/(out[FigHcJ]*out[FigHcJ]))
	}
}

// readBranch adds branch k's readings to r.
func (a *analysis) readBranch(k int, falling bool, v variant, lite bool, r *branchReads) {
	xbr, xhcb, xhcj, xhk := nan(), nan(), nan(), nan()
	if !lite {
		xbr, xhcb, xhcj, xhk = a.loc.crossings(k, v, falling)
	}
	cv := a.loc.crossVar
	if !math.IsNaN(xbr) {
		r.br, r.vbr = append(r.br, math.Abs(xbr)), append(r.vbr, cv[crBr])
	}
	if !math.IsNaN(xhcb) {
		r.hcb, r.vhcb = append(r.hcb, math.Abs(xhcb)), append(r.vhcb, cv[crHcB])
	}
	if !math.IsNaN(xhcj) {
		r.hcj, r.vhcj = append(r.hcj, math.Abs(xhcj)), append(r.vhcj, cv[crHcJ])
	}
	if !falling {
		return
	}
	if m, mb, mh := a.bhMax(k, v); m > 0 {
		r.bh, r.bhB, r.bhH = append(r.bh, m), append(r.bhB, mb), append(r.bhH, math.Abs(mh))
		r.vbh = append(r.vbh, a.bhVar)
	}
	if !math.IsNaN(xhk) && xhk < 0 {
		r.hk, r.vhk = append(r.hk, -xhk), append(r.vhk, cv[crHk])
	}
	reach := -xhk / 2
	if !(reach > 0) && !math.IsNaN(xhcb) {
		reach = math.Abs(xhcb) / 4
	}
	if lite {
		reach = a.reach[k]
	} else if v.src == nil && !v.half {
		a.reach[k] = reach
	}
	if mu := a.slopeNearBr(k, v, reach); !math.IsNaN(mu) {
		r.murec = append(r.murec, mu)
	}
}

// evalWhole sets the figures of the whole record: the loss, μ_initial on
// the initial curve and μrec on a recoil loop.
func (a *analysis) evalWhole(v variant, out vals) {
	out[FigLossJM3] = a.loss(v)
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
}

// varOfMean is the variance of the mean of readings of variances x.
func varOfMean(x []float64) float64 {
	if len(x) == 0 {
		return nan()
	}
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s / float64(len(x)*len(x))
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

// bhMax maximizes −B·H over the 2nd quadrant (H ≤ 0, B ≥ 0) of falling
// branch k, on the samples between its H = 0 and B = 0 crossings (with the
// crossing window as margin). Along the straight piece between two samples
// the product is a quadratic in the piece parameter, maximized exactly.
// Where the product scatters by more than a local parabola's model error
// (smooth.go), the vertex of a local least-squares parabola of the product
// in time is taken instead, with H and B read at its time.
func (a *analysis) bhMax(k int, v variant) (m, atB, atH float64) {
	lo, hi, ok := a.bhRange(k)
	if !ok {
		return 0, 0, 0
	}
	m, atB, atH, im := a.bhPieces(v, lo, hi)
	if im < 0 {
		return 0, 0, 0
	}
	// Pass 2: a local fit around it where noise dominates.
	w := a.loc.window[k]
	us, ps, hs, bs := a.loc.bt[:0], a.loc.bx[:0], a.loc.by[:0], a.loc.bb[:0]
	jm := 0
	for i := max(lo, im-w); i <= min(hi, im+w); i++ {
		if !v.keep(i) {
			continue
		}
		if i <= im {
			jm = len(us)
		}
		p := a.sample(v, i)
		us, ps, hs, bs = append(us, p.t), append(ps, -p.h*p.b), append(hs, p.h), append(bs, p.b)
	}
	a.loc.bt, a.loc.bx, a.loc.by, a.loc.bb = us, ps, hs, bs
	// Without an accepted fit the maximum is read between samples and
	// carries their noise (the product's scatter near the maximum).
	a.bhVar = interpNoise(us[max(0, jm-noiseSpan):min(len(us), jm+noiseSpan+1)], ps[max(0, jm-noiseSpan):min(len(ps), jm+noiseSpan+1)])
	q, ok := localFit(us, ps, jm)
	if !ok {
		return bhCubic(us, hs, bs, jm, m, atB, atH)
	}
	if !(q.c[2] < 0) {
		return m, atB, atH
	}
	xv := -q.c[1] / (2 * q.c[2])
	uv := q.uc + xv*q.scale
	if uv < q.lo || uv > q.hi {
		return m, atB, atH
	}
	pv := q.at(uv)
	a.bhVar = q.se2(uv)
	hv := interpAt(us, hs, uv)
	if f, ok := localFit(us, hs, jm); ok {
		hv = f.at(uv)
	}
	if !(hv < 0) {
		return m, atB, atH
	}
	return pv, pv / -hv, hv
}

// bhRange returns the samples of falling branch k that (BH)max is sought
// on: between its H = 0 and B = 0 crossings with the crossing window as
// margin (to the branch's end when B never reaches 0: a demagnetization
// curve may stop before). ok is false without an H = 0 crossing.
func (a *analysis) bhRange(k int) (lo, hi int, ok bool) {
	c := a.loc.cross[k]
	if c[crBr] < 0 {
		return 0, 0, false
	}
	w := a.loc.window[k]
	lo, hi = max(a.loc.start[k], c[crBr]-w), a.loc.end[k]
	if c[crHcB] >= 0 {
		lo = max(a.loc.start[k], min(c[crBr], c[crHcB])-w)
		hi = min(a.loc.end[k], max(c[crBr], c[crHcB])+w)
	}
	return lo, hi, true
}

// bhPieces is pass 1 of bhMax: the exact maximum of −B·H in the 2nd
// quadrant along the straight pieces between samples lo…hi, with the
// sample ending its piece (im, −1 when none lies in the quadrant).
func (a *analysis) bhPieces(v variant, lo, hi int) (m, atB, atH float64, im int) {
	im = -1
	var prev pt
	first := true
	for i := v.from(lo); i <= hi; i += v.step() {
		p := a.sample(v, i)
		if first {
			prev, first = p, false
			continue
		}
		h0, b0 := prev.h, prev.b
		dh, db := p.h-h0, p.b-b0
		prev = p
		// f(s) = −(h0 + s·dh)(b0 + s·db) = −h0·b0 − s(h0·db + b0·dh) − s²·dh·db
		cand := [3]float64{0, 1, -1}
		if q := dh * db; q != 0 {
			if s := -(h0*db + b0*dh) / (2 * q); s > 0 && s < 1 {
				cand[2] = s
			}
		}
		for _, s := range cand {
			if s < 0 {
				continue
			}
			h, b := h0+s*dh, b0+s*db
			if h <= 0 && b >= 0 && -h*b > m {
				m, atB, atH, im = -h*b, b, h, i
			}
		}
	}
	return m, atB, atH, im
}

// bhCubic refines the maximum (m at atB, atH) on smooth data: the cubics
// of H(t) and B(t) through four samples around sample jm of us, hs, bs
// (smooth.go), maximized by golden section.
func bhCubic(us, hs, bs []float64, jm int, m, atB, atH float64) (float64, float64, float64) {
	for j := max(jm-2, 1); j <= jm && j+2 < len(us); j++ {
		f := func(x float64) float64 {
			hv, bv := cubic4(us, hs, j, x), cubic4(us, bs, j, x)
			if hv > 0 || bv < 0 {
				return 0
			}
			return -hv * bv
		}
		x := goldenMax(f, us[j], us[j+1])
		if pv := f(x); pv > m {
			m, atH, atB = pv, cubic4(us, hs, j, x), cubic4(us, bs, j, x)
		}
	}
	return m, atB, atH
}

// goldenMax returns where f is largest on [a, b], by golden-section search
// (f unimodal there; a straight piece's neighbourhood of a maximum is).
func goldenMax(f func(float64) float64, a, b float64) float64 {
	const g = 0.6180339887498949
	c, d := b-g*(b-a), a+g*(b-a)
	fc, fd := f(c), f(d)
	for range 60 {
		if fc < fd {
			a, c, fc = c, d, fd
			d = a + g*(b-a)
			fd = f(d)
		} else {
			b, d, fd = d, c, fc
			c = b - g*(b-a)
			fc = f(c)
		}
	}
	return (a + b) / 2
}

// slopeNearBr returns the least-squares slope dB/dH/μ0 of the samples of
// falling branch k with −reach ≤ H ≤ 0 (NaN with fewer than 3).
func (a *analysis) slopeNearBr(k int, v variant, reach float64) float64 {
	ic := a.loc.cross[k][crBr]
	if ic < 0 || !(reach > 0) {
		return nan()
	}
	var n, sh, sb, shh, shb float64
	stop := -reach - 0.05*a.span
	for i := v.from(max(a.loc.start[k], ic-a.loc.window[k])); i <= a.loc.end[k]; i += v.step() {
		p := a.sample(v, i)
		if p.h < stop {
			break
		}
		if p.h > 0 || p.h < -reach {
			continue
		}
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

// loss integrates ∮H dB with the trapezoid rule over each full cycle of the
// samples of the variant (closing each cycle with a straight piece) and
// returns the mean over cycles, or NaN without a full cycle. A perturbation
// by scales and shifts only scales the integral (∮dB = ∮dH = 0 around a
// closed path); one with time terms is integrated sample by sample.
func (a *analysis) loss(v variant) float64 {
	step, parity := 1, -1
	switch {
	case v.parity >= 0:
		if a.lossPar == nil {
			lp := lossSubsets(a.h, a.b, a.s)
			a.lossPar = &lp
		}
		return a.lossPar[v.parity]
	case v.half:
		step, parity = 2, 0
	}
	if v.src != nil {
		// The loss is linear in each perturbation: with b' = b·(1+BScale) +
		// BShift + BT1·(t−T0) + BT2·(t−T0)² and h' = h·(1+HScale) + HShift,
		// ∮h' db' = (1+HScale)·[(1+BScale)·∮h db + BT1·∮h dt +
		// BT2·(∮h d(t²) − 2·T0·∮h dt)] around each closed cycle (∮db' = 0).
		if a.lossT == nil {
			w0, l1, l2 := lossMoments(a.h, a.b, a.loc.tm, a.s)
			a.lossT = &[3]float64{w0, l1, l2}
		}
		w0, l1, l2 := a.lossT[0], a.lossT[1], a.lossT[2]
		src := v.src
		return (1 + src.HScale) * ((1+src.BScale)*w0 + src.BT1*l1 + src.BT2*(l2-2*src.T0*l1))
	}
	return loss(a.h, a.b, a.s, parity, step)
}

// lossMoments returns the means over full cycles of ∮h db, ∮h dt and
// ∮h d(t²), each with the trapezoid rule and the closing straight piece.
func lossMoments(h, b []float64, tm func(int) float64, s Shape) (w, l1, l2 float64) {
	n := 0.0
	for _, cy := range s.Cycles() {
		i0, i1 := cy[0].Start, cy[1].End
		if i1-i0 < 2 {
			continue
		}
		var a0, a1, a2 float64
		for i := i0; i < i1; i++ {
			hm := (h[i] + h[i+1]) / 2
			t0, t1 := tm(i), tm(i+1)
			a0 += hm * (b[i+1] - b[i])
			a1 += hm * (t1 - t0)
			a2 += hm * (t1*t1 - t0*t0)
		}
		hm := (h[i1] + h[i0]) / 2
		t0, t1 := tm(i1), tm(i0)
		a0 += hm * (b[i0] - b[i1])
		a1 += hm * (t1 - t0)
		a2 += hm * (t1*t1 - t0*t0)
		w, l1, l2, n = w+a0, l1+a1, l2+a2, n+1
	}
	if n == 0 {
		return nan(), nan(), nan()
	}
	return w / n, l1 / n, l2 / n
}

// lossSubsets returns loss(h, b, s, p, nSub) for every subset p, in one
// pass over the samples.
func lossSubsets(h, b []float64, s Shape) [nSub]float64 {
	var sum, n [nSub]float64
	for _, cy := range s.Cycles() {
		i0, i1 := cy[0].Start, cy[1].End
		var w [nSub]float64
		for i := i0; i+nSub <= i1; i++ {
			w[i%nSub] += (h[i] + h[i+nSub]) / 2 * (b[i+nSub] - b[i])
		}
		for p := range nSub {
			first := i0 + ((p-i0)%nSub+nSub)%nSub
			if i1-first < 2*nSub {
				continue
			}
			last := first + (i1-first)/nSub*nSub
			w[p] += (h[last] + h[first]) / 2 * (b[first] - b[last])
			sum[p] += w[p]
			n[p]++
		}
	}
	var out [nSub]float64
	for p := range out {
		out[p] = sum[p] / n[p]
		if n[p] == 0 {
			out[p] = nan()
		}
	}
	return out
}

// loss integrates ∮H dB with the trapezoid rule over each full cycle of the
// samples (closing each cycle with a straight piece) and returns the mean
// over cycles, or NaN without a full cycle. With parity ≥ 0 only the samples
// of index ≡ parity (mod step) are used.
func loss(h, b []float64, s Shape, parity, step int) float64 {
	var w []float64
	for _, cy := range s.Cycles() {
		i0, i1 := cy[0].Start, cy[1].End
		if parity >= 0 {
			i0 += ((parity-i0)%step + step) % step
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
