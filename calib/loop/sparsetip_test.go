package loop

import (
	"math"
	"testing"

	"hystd/calib/synth"
)

// clustered samples the analytic loop l as buffered stepped capture keeps
// it: H steps by dh from +hm down to −hm and back up to +hm, one step every
// ts seconds; the readings (one about every ts/30, on a time base of their
// own, slightly slower and out of phase, so that steps keep different
// numbers of them) are kept only between the fractions from and to of each
// step, a cluster of a few samples with a gap after it; every skip-th step
// keeps none (a setpoint written late; 0: none skipped). Each sample is the
// settled state of its step on the loop. The record ends on the top step,
// as a sweep that stops at its tip.
func clustered(l synth.Shape, hm, dh, ts, from, to float64, skip int) (tt, h, b []float64) {
	n := int(math.Round(2 * hm / dh))
	per, t0 := ts/30*(1+7e-4), 0.37*ts/30
	for i := 0; i <= 2*n; i++ {
		lv, dir := hm-float64(i)*dh, -1
		if i > n {
			lv, dir = -hm+float64(i-n)*dh, 1
		}
		start := float64(i) * ts
		for ; t0 < start+to*ts; t0 += per {
			if t0 >= start+from*ts && (skip == 0 || (i+1)%skip != 0) {
				tt, h, b = append(tt, t0), append(h, lv), append(b, l.B(lv, dir))
			}
		}
	}
	return tt, h, b
}

// TestTipsOfClusteredStaircase: a staircase of 10 A/m steps to ±1000 A/m
// on the tanh loop of synth (exact), sampled in clusters of 1 to 12
// readings a step, some steps empty. The apex of a staircase is its
// extreme step: each tip must be read at the extreme level sampled there,
// within three of its own standard uncertainties of H, at a time within the
// steps that held that level. The tips at the record's two ends are read by
// the line of their side where the clusters look like noise, and lie
// 0.13–0.35 A/m beyond the level, 3 to 9 of their own standard
// uncertainties (not corrected here): they are checked to half a step, the
// staircase's resolution of H. Before, the tip next to a flat side was the
// mean of it, the flat side and a side on the branch (12 a step: −995.3
// ± 1.2 and 992.7 ± 1.4 A/m; 2–3 a step, every third step empty: −474 A/m,
// 0.65 s early); in the buffered demo, with two or three
// readings a step, the tip at the record's end was the mean of the rising
// branch's last ~160 samples (H 600 A/m, 0.5 s early): closure took 0.16 T
// of the loop's shape for drift, and Br read 0.609 T against the bench's
// 0.651 T.
func TestTipsOfClusteredStaircase(t *testing.T) {
	l := synth.Tanh{Bs: 1.5, Hc: 50, A: 100, Ai: 150}
	const ts = 12.5e-3
	for _, tc := range []struct {
		name     string
		from, to float64
		skip     int
	}{
		{"12 a step", 0.5, 0.9, 0},
		{"2-3 a step", 0.82, 0.9, 0},
		{"1-2 a step", 0.80, 0.85, 0},
		{"every second step empty", 0.5, 0.9, 2},
		{"2-3 a step, every third empty", 0.82, 0.9, 3},
	} {
		tt, h, b := clustered(l, 1000, 10, ts, tc.from, tc.to, tc.skip)
		s, err := Detect(h)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		tips := s.Tips(tt, h, b)
		if len(tips) != 3 {
			t.Fatalf("%s: %d tips, want 3", tc.name, len(tips))
		}
		for k, tp := range tips {
			// The extreme level sampled within three steps of the tip, and
			// the steps in which it was held there.
			sgn := 1.0
			if !tp.Top {
				sgn = -1
			}
			te := tt[tp.Index]
			lv := math.Inf(-1)
			for i := range h {
				if math.Abs(tt[i]-te) < 3*ts {
					lv = math.Max(lv, sgn*h[i])
				}
			}
			lv *= sgn
			lo, hi := math.Inf(1), math.Inf(-1)
			for i := range h {
				if math.Abs(tt[i]-te) < 3*ts && h[i] == lv {
					lo, hi = math.Min(lo, math.Floor(tt[i]/ts)*ts), math.Max(hi, (math.Floor(tt[i]/ts)+1)*ts)
				}
			}
			off := math.Abs(tp.H - lv)
			bad := off > 3*math.Sqrt(tp.vH)+1e-9
			if k == 0 || k == len(tips)-1 {
				bad = off >= 10.0/2
			}
			if bad || tp.T < lo || tp.T > hi {
				t.Errorf("%s: tip at sample %d: H %.4f ± %.2g A/m at %.4f s (N %d); want %.0f A/m, within %.4f–%.4f s",
					tc.name, tp.Index, tp.H, math.Sqrt(tp.vH), tp.T, tp.N, lv, lo, hi)
			}
		}
	}
}
