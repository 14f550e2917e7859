package loop

import (
	"math"
	"testing"

	"hystd/calib/synth"
)

// TestLossSubsets: the one-pass loss of the 16 interleaved subsets equals
// the loss of each subset integrated on its own.
func TestLossSubsets(t *testing.T) {
	for _, start := range []string{"zero", "tip"} {
		sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 3001, Start: start, Uneven: 0.3, NoiseH: 0.2, NoiseB: 1e-3, Draw: 3}
		_, h, b := sw.Generate(tanhLoop)
		s, err := Detect(h)
		if err != nil {
			t.Fatal(err)
		}
		lp := lossSubsets(h, b, s)
		for p := range nSub {
			if w := loss(h, b, s, p, nSub); math.Abs(w-lp[p]) > 1e-9*math.Abs(w) {
				t.Errorf("%s, subset %d: %v in one pass, %v alone", start, p, lp[p], w)
			}
		}
	}
}

// TestLossOfPerturbation: the loss of a perturbed loop from the moments
// (∮h db, ∮h dt, ∮h d(t²)) equals the loss integrated on the perturbed
// samples themselves.
func TestLossOfPerturbation(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 3001, Start: "zero", Uneven: 0.3, NoiseH: 0.2, NoiseB: 1e-3, Draw: 5}
	tt, h, b := sw.Generate(tanhLoop)
	s, err := Detect(h)
	if err != nil {
		t.Fatal(err)
	}
	src := Source{HScale: 1e-3, HShift: 0.7, BScale: -2e-3, BShift: 0.01, BT1: 3e-4, BT2: -2e-5, T0: 0.8}
	a, err := build(tt, h, b, s, Options{})
	if err != nil {
		t.Fatal(err)
	}
	got := a.loss(variant{parity: -1, src: &src})
	hp := make([]float64, len(h))
	bp := make([]float64, len(b))
	for i := range h {
		d := tt[i] - tt[0] - src.T0
		hp[i] = h[i]*(1+src.HScale) + src.HShift
		bp[i] = b[i]*(1+src.BScale) + src.BShift + src.BT1*d + src.BT2*d*d
	}
	want := loss(hp, bp, s, -1, 1)
	if math.Abs(got-want) > 1e-9*math.Abs(want) {
		t.Errorf("loss of the perturbed loop %.12g from the moments, %.12g on the samples", got, want)
	}
}

// TestNoCoercivityOnTheWrongSide: a demagnetization curve of the
// straight-line magnet (REFERENCE §10 item 12) anchored at B = 0 at its
// start tip (a level from a demagnetized start applied to a curve that did
// not start demagnetized) has B = 0 only at H = +2 MA/m, in the first
// quadrant: no HcB or HcJ may be read there.
func TestNoCoercivityOnTheWrongSide(t *testing.T) {
	l := synth.Magnet{Br: 1.3, MuRec: 1.05, Hsw: 1.2e6}
	var tt, h, b []float64
	for i := 0; i <= 2600; i++ {
		hv := 2e6 - 1e3*float64(i)
		tt, h, b = append(tt, float64(i)*1e-3), append(h, hv), append(b, l.B(hv, -1)-l.B(2e6, -1))
	}
	for i := 1; i <= 600; i++ { // recoil towards H = 0
		hv := -0.6e6 + 1e3*float64(i)
		tt, h, b = append(tt, float64(2600+i)*1e-3), append(h, hv), append(b, b[2600]+1.05*1.25663706212e-6*1e3*float64(i))
	}
	s, err := Detect(h)
	if err != nil {
		t.Fatal(err)
	}
	fs, err := Figures(tt, h, b, s, Options{})
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range fs {
		if f.Name == FigHcB || f.Name == FigHcJ {
			t.Errorf("%s = %g read where H > 0", f.Name, f.Value)
		}
	}
}
