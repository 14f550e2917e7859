package process

import (
	"errors"
	"math"
	"testing"

	"hystd/acq/record"
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
