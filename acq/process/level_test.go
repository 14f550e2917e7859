package process

import (
	"errors"
	"math"
	"strings"
	"testing"

	"hystd/acq/record"
	"hystd/calib/loop"
	"hystd/calib/synth"
	"hystd/calib/units"
)

// TestTopOfStraightLineMagnet: the straight-line magnet of REFERENCE §10
// item 12 (Br = 1.30 T, μ_rec = 1.05, switching at 1.2 MA/m) cycled to
// ±2 MA/m, centred by Loop; near the top tip B = Br + μ0·μ_rec·H exactly
// (synth.Magnet), so the level read there must be that line, whatever the
// integrator's drift and offset were.
func TestTopOfStraightLineMagnet(t *testing.T) {
	l := synth.Magnet{Br: 1.3, MuRec: 1.05, Hsw: 1.2e6}
	sw := synth.Sweep{Hm: 2e6, Cycles: 1, PerBranch: 6000, Dt: 1e-3, Start: "tip", Draw: 2}
	tt, h, b := sw.Generate(l)
	s := Setup{Area: 100e-6, N2: 50, HFrom: HFromFieldMeter, Class: ClassMagnet}
	bn := bench{s: s, hold: 300, v0: -5e-6, noiseI: 1e-5, noiseP: 1e-6, probe: true}
	pts, _, _, err := Loop(bn.raw(tt, h, b, 1e-3), bn.s)
	if err != nil {
		t.Fatal(err)
	}
	top, err := TopOf(pts)
	if err != nil {
		t.Fatal(err)
	}
	// Saturated: both branches are the same line near the tip; what is left
	// (0.2 mT here, 5e-5 of B) is far below the 2 mT at which acq/fixture
	// flags a start level.
	if !(top.UGap > 0) || math.Abs(top.Gap) > 5e-4 {
		t.Errorf("saturated loop: branches differ by %.3g ± %.2g T near the tip", top.Gap, top.UGap)
	}
	for _, tc := range []struct {
		name string
		h    float64
		ok   bool
	}{
		{"at the tip", 2e6, true},
		{"inside the window", 1.95e6, true},
		{"just beyond the tip", 2.02e6, true},
		{"half way down", 1e6, false},
		{"far beyond the tip", 2.5e6, false},
	} {
		got, u, err := top.At(tc.h)
		if !tc.ok {
			if err == nil {
				t.Errorf("%s: H = %g accepted (B %v)", tc.name, tc.h, got)
			}
			continue
		}
		if err != nil {
			t.Errorf("%s: %v", tc.name, err)
			continue
		}
		want := 1.3 + units.Mu0*1.05*tc.h
		// 1e-4 T: the integrator noise of 1 µWb-turn over N2·A = 5 mWb/T is
		// 0.2 mT per sample, averaged over the ~600 points of the window.
		if math.Abs(float64(got)-want) > 1e-4 || !(u > 0 && u < 1e-4) {
			t.Errorf("%s: B(%g A/m) = %.6f ± %.2g T, want %.6f T", tc.name, tc.h, float64(got), float64(u), want)
		}
	}
}

func TestTopOfRefuses(t *testing.T) {
	flat := make([]record.Point, 10)
	few := []record.Point{{H: -1, B: -1}, {H: 1, B: 1}, {H: 0.99, B: 1}}
	same := make([]record.Point, 12)
	for i := range same {
		same[i] = record.Point{H: 1, B: 1}
	}
	same[0].H = -1
	for _, tc := range []struct {
		name string
		p    []record.Point
	}{{"no points", nil}, {"H constant", flat}, {"three points at the tip", few}, {"no spread at the tip", same}} {
		if _, err := TopOf(tc.p); !errors.Is(err, ErrNoTop) {
			t.Errorf("%s: err %v, want ErrNoTop", tc.name, err)
		}
	}
	if _, _, err := (TopLevel{}).At(0); !errors.Is(err, ErrNoTop) {
		t.Errorf("zero TopLevel: %v", err)
	}
}

// TestTipsShortOfTheField: under closed-loop field control the tips of a
// recorded loop miss ±H_m by some kA/m (the yoke's field lags the ramp).
// The straight-line magnet of REFERENCE §10 item 12 swept +2 MA/m →
// −1.99 MA/m → +1.985 MA/m is still a symmetric loop, so its centred level
// at the top must be the line B = Br + μ0·μ_rec·H (synth.Magnet) there;
// centering on the raw tip B alone would put it off by
// μ0·μ_rec·(H_top + H_bottom)/2 ≈ 3.3 mT, and closing on the raw tips would
// tilt it by another μ0·μ_rec·15 kA/m ≈ 20 mT over the loop.
func TestTipsShortOfTheField(t *testing.T) {
	l := synth.Magnet{Br: 1.3, MuRec: 1.05, Hsw: 1.2e6}
	var tt, h, b []float64
	add := func(from, to float64, n, dir int) {
		for i := range n {
			hv := from + (to-from)*float64(i)/float64(n)
			tt, h, b = append(tt, float64(len(tt))*1e-3), append(h, hv), append(b, l.B(hv, dir))
		}
	}
	add(2e6, -1.99e6, 6000, -1)
	add(-1.99e6, 1.985e6, 6001, 1)
	s := Setup{Area: 100e-6, N2: 50, HFrom: HFromFieldMeter, Class: ClassMagnet}
	bn := bench{s: s, hold: 300, v0: -5e-6, noiseI: 1e-5, noiseP: 1e-7, probe: true}
	pts, fs, cs, err := Loop(bn.raw(tt, h, b, 1e-3), bn.s)
	if err != nil {
		t.Fatal(err)
	}
	c := corrs(cs)
	if !strings.Contains(c["centering"].Note, "differing") || !strings.Contains(c["closure"].Note, "less dB/dH") {
		t.Errorf("corrections do not say the tips' H differ: %q, %q", c["centering"].Note, c["closure"].Note)
	}
	top, err := TopOf(pts)
	if err != nil {
		t.Fatal(err)
	}
	for _, hv := range []float64{1.985e6, 2e6} {
		got, _, err := top.At(hv)
		want := 1.3 + units.Mu0*1.05*hv
		// 0.3 mT: the integrator noise (20 µT per sample) averaged, plus
		// what a straight-line tip slope leaves of the 5 mT closure error.
		if err != nil || math.Abs(float64(got)-want) > 3e-4 {
			t.Errorf("level at %g A/m: %.5f T (%v), want %.5f T", hv, float64(got), err, want)
		}
	}
	within(t, "short tips", loop.FigBr, figs(fs), 1.3, 1e-3)
}

// TestStartLevel: Loop asks the callback for the level at the curve's first
// field and uses what it returns as StartB; its error is Loop's error.
func TestStartLevel(t *testing.T) {
	l := synth.Magnet{Br: 1.3, MuRec: 1.05, Hsw: 1.2e6}
	var tt, h, b []float64
	for i := range 3000 {
		hv := 2e6 - 3e6*float64(i)/3000
		tt, h, b = append(tt, float64(i)*1e-3), append(h, hv), append(b, l.B(hv, -1))
	}
	s := Setup{Area: 100e-6, N2: 50, HFrom: HFromFieldMeter, Class: ClassMagnet, Drift: DriftFromLevel}
	bn := bench{s: s, hold: 100, probe: true}
	raw := bn.raw(tt, h, b, 1e-3)
	var asked float64
	bn.s.StartLevel = func(h0 float64) (units.Tesla, units.Tesla, error) {
		asked = h0
		return units.Tesla(l.B(h0, -1)), 1e-4, nil
	}
	_, fs, _, err := Loop(raw, bn.s)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(asked-2e6) > 1 {
		t.Errorf("asked at H = %g A/m, want the first sweep sample's 2e6", asked)
	}
	within(t, "start level", loop.FigBr, figs(fs), 1.3, 1e-3)
	refused := errors.New("no level here")
	bn.s.StartLevel = func(float64) (units.Tesla, units.Tesla, error) { return 0, 0, refused }
	if _, _, _, err := Loop(raw, bn.s); !errors.Is(err, refused) {
		t.Errorf("err %v, want the callback's", err)
	}
}

// TestTopOfGap: near the tip of a loop that does not saturate, the falling
// branch lies above the rising one (a lens opening below the tip); here
// made as B = k·H ± c·(H_m − H), so over the window of the top 5 % of the
// range the mean gap is 2c times the mean distance from the tip. A
// reversible tip (c = 0) has no gap.
func TestTopOfGap(t *testing.T) {
	const hm, k = 3e5, 2e-6
	for _, c := range []float64{0, 1e-7, 5e-7} {
		var pts []record.Point
		var want float64
		n := 0
		for i := 0; i <= 4000; i++ {
			h := hm - 2*hm*float64(i)/4000
			pts = append(pts, record.Point{H: h, B: k*h + c*(hm-h), Branch: -1},
				record.Point{H: h, B: k*h - c*(hm-h), Branch: 1})
			if h >= hm-TopFraction*2*hm {
				want += 2 * c * (hm - h)
				n++
			}
		}
		want /= float64(n)
		l, err := TopOf(pts)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(l.Gap-want) > 1e-9+1e-3*want || !(l.UGap >= 0) {
			t.Errorf("c = %g: gap %.6g ± %.2g T, want %.6g T", c, l.Gap, l.UGap, want)
		}
	}
}
