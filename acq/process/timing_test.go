package process

import (
	"math"
	"strings"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/calib/loop"
)

// On a straight ramp at rate r, a common error δ in the samples' times
// reads H(t + δ) = H(t) + δ·dH/dt (exact analytic result): on the rising
// branch H at B = 0 moves by +δ·r, on the falling by −δ·r, so |HcB| (the
// mean of both magnitudes) moves by δ·r. The timing component addTiming
// adds to HcB must be that, with δ the samples' standard time uncertainty
// TUnc/√3 (rectangular, GUM 4.3.7). The loop: two cycles of ±1000 A/m at
// 800 A/m/s sampled every 0.5 ms, B = 1.5·tanh((H ∓ 50)/200) T on the
// rising (−) and falling (+) branches: HcB = 50 A/m exactly.
func TestTimingComponentIsRateTimesTimeU(t *testing.T) {
	const rate, hm, hc, dt = 800.0, 1000.0, 50.0, 5e-4
	var ts, hs, bs []float64
	h, dir := hm, -1.0
	for i := 0; i < int(4*2*hm/rate/dt); i++ {
		ts, hs = append(ts, float64(i)*dt), append(hs, h)
		bs = append(bs, 1.5*math.Tanh((h-dir*hc)/200))
		h += dir * rate * dt
		if h <= -hm || h >= hm {
			h, dir = math.Max(-hm, math.Min(hm, h)), -dir
		}
	}
	shape, err := loop.Detect(hs)
	if err != nil {
		t.Fatal(err)
	}
	c := curve{t: ts, h: hs, b: bs, shape: shape, nab: 1}
	s := Setup{PathLength: 0.1, Area: 1e-4, N1: 100, N2: 10, Class: ClassSoft}
	figs, err := c.figures(s, nil)
	if err != nil {
		t.Fatal(err)
	}
	before := map[string]record.Figure{}
	for _, f := range figs {
		t.Logf("%s %.5g ± %.2g", f.Name, f.Value, f.U)
	}
	for _, f := range figs {
		before[f.Name] = f
	}
	tunc := 600 * time.Microsecond
	tu := make([]time.Duration, len(ts))
	for i := range tu {
		tu[i] = tunc
	}
	figs, err = c.addTiming(s, figs, tu)
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range figs {
		if f.Name != loop.FigHcB {
			continue
		}
		b := before[f.Name]
		comp := math.Sqrt(math.Pow(f.U/2, 2) - math.Pow(b.U/2, 2))
		want := tunc.Seconds() / math.Sqrt(3) * rate
		t.Logf("HcB %.4f A/m (exact 50); U %.3g → %.3g; timing component %.4g A/m, δ·r = %.4g A/m", f.Value, b.U, f.U, comp, want)
		if math.Abs(f.Value-hc) > 0.05 {
			t.Fatalf("HcB %.4f A/m, want 50", f.Value)
		}
		if math.Abs(comp-want) > 0.05*want || !strings.Contains(f.Note, "timing") {
			t.Fatalf("timing component %.4g A/m, want δ·r = %.4g within 5 %% (note: %s)", comp, want, f.Note)
		}
		return
	}
	t.Fatal("no HcB")
}
