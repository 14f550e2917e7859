// Package synth generates analytic B–H loops whose figures are known in
// closed form, for tests and benchmarks of the calib packages. The formulas
// for the exact figures are derived in the comments of each shape.
package synth

import (
	"math"
	"math/rand/v2"

	"hystd/calib/units"
)

// Shape gives B (T) on a branch at field H (A/m); dir is +1 rising, −1
// falling, 0 the initial curve.
type Shape interface {
	B(h float64, dir int) float64
}

// Tanh is a soft loop with branches B = Bs·tanh((H ± Hc)/A) (falling: +Hc)
// and an initial curve B = Bs·tanh(H/Ai). Exact figures, for tips far in
// saturation ((Hm − Hc)/A ≥ 12, so tanh differs from 1 by < 1e-10):
//   - Br = Bs·tanh(Hc/A) (falling branch at H = 0);
//   - HcB = Hc (B = 0 where H ± Hc = 0);
//   - HcJ = x solving x = Hc + A·atanh(μ0·x/Bs) (J = B − μ0·H = 0 at H = −x);
//   - loss W = ∫(B_fall − B_rise)dH over [−Hm, Hm]
//     = 2·Bs·A·(lncosh((Hm+Hc)/A) − lncosh((Hm−Hc)/A));
//   - μ_initial at B = b: b/(μ0·Ai·atanh(b/Bs)).
type Tanh struct{ Bs, Hc, A, Ai float64 }

// B implements Shape.
func (l Tanh) B(h float64, dir int) float64 {
	switch dir {
	case -1:
		return l.Bs * math.Tanh((h+l.Hc)/l.A)
	case 1:
		return l.Bs * math.Tanh((h-l.Hc)/l.A)
	}
	return l.Bs * math.Tanh(h/l.Ai)
}

// LnCosh is ln(cosh x), computed without overflow.
func LnCosh(x float64) float64 {
	x = math.Abs(x)
	return x + math.Log1p(math.Exp(-2*x)) - math.Ln2
}

// Br, HcJ and Loss are the exact figures of the Tanh loop.
func (l Tanh) Br() float64 { return l.Bs * math.Tanh(l.Hc/l.A) }

// HcJ solves x = Hc + A·atanh(μ0·x/Bs) by fixed-point iteration (a
// contraction: the derivative is A·μ0/Bs ≈ 1e-5).
func (l Tanh) HcJ() float64 {
	x := l.Hc
	for range 50 {
		x = l.Hc + l.A*math.Atanh(units.Mu0*x/l.Bs)
	}
	return x
}

// Loss returns ∮H dB over the tips ±hm.
func (l Tanh) Loss(hm float64) float64 {
	return 2 * l.Bs * l.A * (LnCosh((hm+l.Hc)/l.A) - LnCosh((hm-l.Hc)/l.A))
}

// MuInitial returns B/(μ0·H) on the initial curve at B = b.
func (l Tanh) MuInitial(b float64) float64 { return b / (units.Mu0 * l.Ai * math.Atanh(b/l.Bs)) }

// Para is a parallelogram loop: between the saturation flats B = ±Bs the
// falling branch is B = S·(H + Hc), the rising one B = S·(H − Hc), S in T/(A/m).
// Exact figures (with S·Hc < Bs and tips beyond Hc + Bs/S):
//   - Br = S·Hc; HcB = Hc;
//   - HcJ: S·(H + Hc) − μ0·H = 0 → HcJ = S·Hc/(S − μ0);
//   - loss: the enclosed parallelogram has horizontal sides 2·Hc at B = ±Bs
//     and height 2·Bs, so W = 4·Hc·Bs.
type Para struct{ Bs, Hc, S float64 }

// B implements Shape.
func (l Para) B(h float64, dir int) float64 {
	off := l.Hc
	if dir == 1 {
		off = -l.Hc
	}
	return math.Max(-l.Bs, math.Min(l.Bs, l.S*(h+off)))
}

// Magnet is a straight-line magnet: the polarization is square,
// J = ±Js + μ0·(MuRec − 1)·H with the sign switching at H = ∓Hsw, so that on
// the falling branch in the 2nd quadrant B = J + μ0·H = Br + μ0·MuRec·H with
// Br = Js. Exact figures (for Hsw > Br/(μ0·MuRec) and Js > μ0·(MuRec−1)·Hsw):
//   - HcB = Br/(μ0·MuRec); HcJ = Hsw (J jumps through zero there);
//   - (BH)max: −B·H = −(Br + μ0·MuRec·H)·H is largest at H = −Br/(2·μ0·MuRec),
//     B = Br/2, so (BH)max = Br²/(4·μ0·MuRec);
//   - Hk: J = 0.9·Br is reached on the line only at −0.1·Br/(μ0·(MuRec−1)),
//     beyond Hsw, so Hk = Hsw and squareness = 1;
//   - loss: J_fall − J_rise = 2·Js on (−Hsw, Hsw) and 0 outside, and
//     ∮μ0·H dH = 0, so W = 4·Js·Hsw.
type Magnet struct{ Br, MuRec, Hsw float64 }

// B implements Shape.
func (l Magnet) B(h float64, dir int) float64 {
	js := l.Br
	if dir == -1 && h < -l.Hsw || dir == 1 && h < l.Hsw {
		js = -l.Br
	}
	if dir == 0 {
		js = 0
	}
	return js + units.Mu0*(l.MuRec-1)*h + units.Mu0*h
}

// Sweep describes how a loop is sampled.
type Sweep struct {
	Hm        float64 // tip field, A/m
	Cycles    int     // full cycles after the start
	PerBranch int     // mean samples per branch
	Dt        float64 // mean sample interval, s (0: 1 ms)
	// Start: "tip" starts at +Hm falling; "zero" starts at H = 0 rising on
	// the rising branch (a partial first branch); "initial" starts at H = 0
	// on the initial curve.
	Start          string
	Uneven         float64 // relative jitter of the sample interval, 0..0.9
	NoiseH, NoiseB float64 // standard deviations, A/m and T
	Draw           uint64  // selects the pseudo-random noise sequence
}

// Generate samples the shape along a triangular H sweep and returns the
// times (s), fields (A/m) and flux densities (T), with noise added.
func (s Sweep) Generate(l Shape) (t, h, b []float64) {
	r := rand.New(rand.NewPCG(s.Draw, 7))
	dt := s.Dt
	if dt == 0 {
		dt = 1e-3
	}
	du := 1 / float64(s.PerBranch) // one branch = 1 unit of phase
	// Phase u: branch k spans [k, k+1); branch 0 falls from +Hm.
	u, end := 0.0, float64(2*s.Cycles)
	initial := false
	switch s.Start {
	case "zero":
		u = -0.5 // rising from 0 towards +Hm on the branch before branch 0
	case "initial":
		u, initial = -0.5, true
	}
	tt := 0.0
	for u <= end+1e-12 {
		var hv float64
		var dir int
		k := math.Floor(u)
		f := u - k
		if int(k)%2 == 0 { // falling
			hv, dir = s.Hm*(1-2*f), -1
		} else {
			hv, dir = s.Hm*(-1+2*f), 1
		}
		if u < 0 { // branch −1 is rising
			hv, dir = s.Hm*(-1+2*(u+1)), 1
			if initial {
				dir = 0
			}
		}
		bv := l.B(hv, dir)
		t = append(t, tt)
		h = append(h, hv+s.NoiseH*r.NormFloat64())
		b = append(b, bv+s.NoiseB*r.NormFloat64())
		j := 1 + s.Uneven*(2*r.Float64()-1)
		u += du * j
		tt += dt * j
	}
	return t, h, b
}
