package loop

import (
	"math"
	"testing"

	"hystd/calib/internal"

	"hystd/calib/correct"
	"hystd/calib/synth"
)

// BenchmarkChain1M times the calib chain on a 1 M-sample loop (two cycles,
// 250 k samples per branch, noise, uneven sampling): H from current, B from
// flux, drift baseline, air flux, branch detection, closure, centering, J
// and every figure with its budget (two sources).
func BenchmarkChain1M(b *testing.B) {
	sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 250000, Dt: 1e-5, Start: "tip", Uneven: 0.2,
		NoiseH: 0.1, NoiseB: 1e-4, Draw: 1}
	tt, h0, b0 := sw.Generate(tanhLoop)
	const n1, n2, l, a = 200, 100, 0.1413716694115407, 50e-6
	cur := make([]float64, len(h0))
	psi0 := make([]float64, len(h0))
	for i := range h0 {
		cur[i] = h0[i] * l / n1
		psi0[i] = b0[i]*n2*a + 1e-5*tt[i]
	}
	h := make([]float64, len(h0))
	psi := make([]float64, len(h0))
	j := make([]float64, len(h0))
	rate := correct.Rate{Rate: 1e-5, U: 1e-8}
	opt := Options{Sources: []Source{{Name: "path", HScale: 1e-3}, {Name: "area", BScale: 2e-3}}}
	b.ReportAllocs()
	b.ResetTimer()
	cpu0 := internal.CPUTime()
	for range b.N {
		copy(psi, psi0)
		correct.HFromCurrent(h, cur, n1, l)
		correct.Baseline(tt, psi, tt[0], rate, rate)
		bb := correct.BFromFlux(psi, psi, n2, a)
		correct.AirFlux(bb, h, 60e-6, a)
		s, err := Detect(h)
		if err != nil {
			b.Fatal(err)
		}
		tips := s.Tips(tt, h, bb)
		if ta, tb, ok := ClosurePair(tips); ok {
			if err := correct.Closure(tt, bb, ta.T, tb.T, tb.B-ta.B); err != nil {
				b.Fatal(err)
			}
		}
		top, bot, _ := TipLevels(s.Tips(tt, h, bb))
		correct.Center(bb, top, bot)
		correct.Polarization(j, h, bb)
		if _, err := Figures(tt, h, bb, s, opt); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric((internal.CPUTime()-cpu0)/float64(b.N), "cpu-ns/op")
	b.ReportMetric(float64(len(h)), "samples")
}

// BenchmarkPeerTrapezoid1M is the peer of BenchmarkChain1M: the least any
// script does with the same 1 M samples (copy them, then one trapezoid pass
// of ∮H dB). The ratio of the two, measured side by side, is the figure
// to compare across loads (DEVELOPERS.md).
func BenchmarkPeerTrapezoid1M(b *testing.B) {
	sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 250000, Dt: 1e-5, Start: "tip", Uneven: 0.2,
		NoiseH: 0.1, NoiseB: 1e-4, Draw: 1}
	_, h0, b0 := sw.Generate(tanhLoop)
	h := make([]float64, len(h0))
	bb := make([]float64, len(b0))
	b.ReportAllocs()
	b.ResetTimer()
	cpu0 := internal.CPUTime()
	w := 0.0
	for range b.N {
		copy(h, h0)
		copy(bb, b0)
		w = 0
		for i := 0; i+1 < len(h); i++ {
			w += (h[i] + h[i+1]) / 2 * (bb[i+1] - bb[i])
		}
	}
	b.ReportMetric((internal.CPUTime()-cpu0)/float64(b.N), "cpu-ns/op")
	if math.IsNaN(w) {
		b.Fatal("NaN loss")
	}
}
