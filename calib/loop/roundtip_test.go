package loop

import (
	"math"
	"math/rand/v2"
	"testing"
)

// cosSweep samples the rounded sweep H(t) = Hm·cos(2π·t) (period 1) n times
// per cycle over two cycles, starting a fraction `phase` of a step after the
// top tip, so no sample falls on a tip; B = 1.5·tanh((H ± 50 A/m)/100 A/m),
// + on the falling branch, with white noise of σH and σB added.
//
// Exact tips (the sweep's own extremes): H = ±Hm at t = k/2, interior ones at
// k = 1, 2, 3 (t = 0 and t = 2 lie outside the record's first and last
// samples). At the tips the branches meet to 1.5·(1 − tanh(9.5)) < 2e-8 T.
func cosSweep(n int, phase, hm, sH, sB float64, r *rand.Rand) (tt, h, b []float64) {
	for i := 0; i < 2*n; i++ {
		x := (float64(i) + phase) / float64(n)
		hv := hm * math.Cos(2*math.Pi*x)
		off := 50.0
		if math.Sin(2*math.Pi*x) < 0 { // dH/dt > 0: rising
			off = -50
		}
		bv := 1.5 * math.Tanh((hv+off)/100)
		if r != nil {
			hv += sH * r.NormFloat64()
			bv += sB * r.NormFloat64()
		}
		tt, h, b = append(tt, x), append(h, hv), append(b, bv)
	}
	return tt, h, b
}

// interiorTips returns the tips of a cosSweep away from the record's ends,
// with the exact tip time t = k/2 nearest to each.
func interiorTips(t *testing.T, tt, h, b []float64) []Tip {
	t.Helper()
	s, err := Detect(h)
	if err != nil {
		t.Fatal(err)
	}
	var out []Tip
	for _, tp := range s.Tips(tt, h, b) {
		if tt[tp.Index] > 0.25 && tt[tp.Index] < 1.75 {
			out = append(out, tp)
		}
	}
	if len(out) != 3 {
		t.Fatalf("%d interior tips, want 3", len(out))
	}
	return out
}

// TestRoundedTipSmooth: on a rounded, noise-free tip the apex is never
// further from the exact Hm than the extreme sample, and within the error
// bound of a parabola through the extreme sample and its neighbours.
//
// Bound (derived here, exact analysis): in phase θ = 2π·t the sweep is
// Hm·cos θ; the parabola p through three samples θ0 < θ1 < θ2 spaced δ = 2π/n
// around the apex differs from cos by at most |f”'|max/6 · max|Π(θ − θk)|,
// with |f”'| = |sin θ| ≤ |θ| ≤ 1.5·δ over the samples (the extreme sample lies
// within δ/2 of the apex) and max|Π| = 2δ³/(3√3) for equal spacing, so
// |max p − max cos| ≤ Hm·1.5δ·2δ³/(18√3) ≈ 0.0962·Hm·δ⁴. The extreme sample
// misses by Hm·(1 − cos φ) with φ its phase from the apex (|φ| ≤ δ/2).
// The lines through the two samples on either side, which a triangular sweep
// needs, overshoot a rounded tip by about Hm·δ² instead.
func TestRoundedTipSmooth(t *testing.T) {
	const hm = 1000.0
	for _, n := range []int{20, 50, 200, 2000} {
		for _, phase := range []float64{0.13, 0.5, 0.91} {
			tt, h, b := cosSweep(n, phase, hm, 0, 0, nil)
			d := 2 * math.Pi / float64(n)
			bound := 0.0962*hm*d*d*d*d + 1e-9*hm
			for _, tp := range interiorTips(t, tt, h, b) {
				e := math.Abs(tp.H) - hm
				se := math.Abs(math.Abs(h[tp.Index]) - hm)
				u := 2 * math.Sqrt(tp.vH)
				t.Logf("n %4d phase %.2f tip %5d: H error %+.3e A/m (bound %.2e, extreme sample %.2e), U %.2e", n, phase, tp.Index, e, bound, se, u)
				if math.Abs(e) > bound {
					t.Errorf("n %d phase %.2f tip at %d: H %.9g misses Hm by %.3g A/m, more than the parabola's bound %.3g", n, phase, tp.Index, tp.H, e, bound)
				}
				if math.Abs(e) > se+1e-9*hm {
					t.Errorf("n %d phase %.2f tip at %d: H error %.3g A/m, worse than the extreme sample's %.3g", n, phase, tp.Index, e, se)
				}
				if math.Abs(e) > math.Max(u, 1e-9*hm) {
					t.Errorf("n %d phase %.2f tip at %d: H error %.3g A/m not covered by U = %.3g", n, phase, tp.Index, e, u)
				}
			}
		}
	}
}

// TestRoundedTipNoisy: the rounded sweep of TestRoundedTipSmooth at 2000
// and 20 000 samples per cycle with white noise of 0.5 A/m on H and 0.2 mT
// on B, 20 seeds (60 interior tips): U (k = 2) of each tip's H covers the
// exact Hm in at least 54 of 60 (for a true 95 % coverage ≥ 54 of 60 fails
// about one time in 30), and the mean error is within 3 standard errors of
// zero (no bias from lines extrapolated past the apex).
func TestRoundedTipNoisy(t *testing.T) {
	const hm, sH = 1000.0, 0.5
	for _, n := range []int{2000, 20000} {
		hits, tips := 0, 0
		var sum, sumU2 float64
		for seed := uint64(1); seed <= 20; seed++ {
			r := rand.New(rand.NewPCG(seed, 77))
			tt, h, b := cosSweep(n, 0.37, hm, sH, 2e-4, r)
			for _, tp := range interiorTips(t, tt, h, b) {
				e := math.Abs(tp.H) - hm
				u := 2 * math.Sqrt(tp.vH)
				tips++
				if math.Abs(e) <= u {
					hits++
				}
				sum += e
				sumU2 += u * u / 4
			}
		}
		mean := sum / float64(tips)
		se := math.Sqrt(sumU2) / float64(tips)
		t.Logf("n %d: U covers %d of %d tips; mean error %+.4f A/m (standard error about %.4f)", n, hits, tips, mean, se)
		if hits < 54 {
			t.Errorf("n %d: U (k = 2) covers the exact tip in %d of %d, want ≥ 54", n, hits, tips)
		}
		if math.Abs(mean) > 3*se {
			t.Errorf("n %d: mean tip error %+.4f A/m, more than 3 standard errors (%.4f): biased", n, mean, se)
		}
	}
}
