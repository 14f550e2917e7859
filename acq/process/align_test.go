package process

import (
	"math"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/calib/loop"
	"hystd/calib/synth"
)

// skewed returns raw samples of a known loop whose current (or probe)
// channel was read k samples after the flux: sample i carries the H channel
// of sample i+k and, when keep, the offset DtI (DtB) = T[i+k] − T[i] that
// says so. The last k sweep samples are dropped.
func skewed(bn bench, tt, h, b []float64, k int, keep bool) (raw []record.Sample) {
	all := bn.raw(tt, h, b, 1e-3)
	out := make([]record.Sample, 0, len(all)-k)
	for i := 0; i+k < len(all); i++ {
		s := all[i]
		later := all[i+k]
		s.I, s.BProbe = later.I, later.BProbe
		if keep {
			if bn.probe {
				s.DtB = later.T - s.T
			} else {
				s.DtI = later.T - s.T
			}
		}
		out = append(out, s)
	}
	return out
}

// TestTimeAlignment: the tanh loop of synth.Tanh (exact Br and Hc derived
// there) under a drive that ramps between samples within one setpoint (the
// synthetic samples all carry setpoint 0, as when the supply slews on its
// own), sampled with the H channel read 6 samples (≈ 6 ms at ≈ 670 A/m/s,
// uneven spacing) after the flux. With the per-sample offsets kept, the
// current — or the Hall-probe field — is interpolated onto the flux
// reading's time and the figures come back within 0.3 %; with the offsets
// dropped the same data give HcB off by ≈ 4 A/m (8 %), so the check can fail.
func TestTimeAlignment(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 3000, Dt: 1e-3, Start: "tip", Uneven: 0.3, Draw: 4}
	tt, h, b := sw.Generate(soft)
	tests := []struct {
		name    string
		probe   bool
		keep    bool
		aligned bool
	}{
		{"current, offsets kept", false, true, true},
		{"current, offsets dropped", false, false, false},
		{"field meter, offsets kept", true, true, true},
		{"field meter, offsets dropped", true, false, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s := ringSetup()
			if tc.probe {
				s.HFrom = HFromFieldMeter
			}
			bn := bench{s: s, hold: 200, probe: tc.probe}
			raw := skewed(bn, tt, h, b, 6, tc.keep)
			_, fs, cs, err := Loop(raw, bn.s)
			if err != nil {
				t.Fatal(err)
			}
			m := figs(fs)
			hc, br := m[loop.FigHcB].Value, m[loop.FigBr].Value
			eHc, eBr := math.Abs(hc-soft.Hc)/soft.Hc, math.Abs(br-soft.Br())/soft.Br()
			t.Logf("HcB %.3f A/m (exact %.3f), Br %.5f T (exact %.5f)", hc, soft.Hc, br, soft.Br())
			_, noted := corrs(cs)["time-alignment"]
			if tc.aligned {
				if eHc > 3e-3 || eBr > 3e-3 {
					t.Errorf("not recovered: HcB rel err %.2g, Br rel err %.2g (want ≤ 3e-3)", eHc, eBr)
				}
				if !noted {
					t.Errorf("time-alignment correction not recorded: %+v", cs)
				}
			} else {
				if eHc < 0.03 {
					t.Errorf("a 6-sample skew left HcB within %.2g of the truth: the check cannot tell", eHc)
				}
				if noted {
					t.Error("time-alignment recorded without offsets")
				}
			}
		})
	}
}

// TestAlignToZeroOffsets: without offsets (samples stored before they
// existed) the values are returned exactly as read.
func TestAlignToZeroOffsets(t *testing.T) {
	raw := []record.Sample{{T: 0, I: 1}, {T: time.Millisecond, I: 2}, {T: 2 * time.Millisecond, I: math.NaN()}, {T: 3 * time.Millisecond, I: 4}}
	got, skew, _ := alignTo(raw, func(r *record.Sample) (float64, time.Duration) { return r.I, r.DtI })
	if skew != 0 || got[0] != 1 || got[1] != 2 || !math.IsNaN(got[2]) || got[3] != 4 {
		t.Fatalf("got %v, skew %v", got, skew)
	}
	// Offsets of +0.5 ms: sample 1's current is the mean of readings at
	// 0.5 and 1.5 ms, i.e. halfway between 1 and 2 on the line through them.
	raw[0].DtI, raw[1].DtI, raw[3].DtI = 500*time.Microsecond, 500*time.Microsecond, 500*time.Microsecond
	got, skew, moved := alignTo(raw, func(r *record.Sample) (float64, time.Duration) { return r.I, r.DtI })
	if skew != 500*time.Microsecond || moved != 3 || math.Abs(got[1]-1.5) > 1e-12 || math.Abs(got[0]-0.5) > 1e-12 {
		t.Fatalf("got %v, skew %v, %d moved", got, skew, moved)
	}
	// The same readings on a staircase, each sample at its own setpoint:
	// the setting completed before both readings of a sample, so none moves.
	for i := range raw {
		raw[i].Setpoint = float64(i)
	}
	got, _, moved = alignTo(raw, func(r *record.Sample) (float64, time.Duration) { return r.I, r.DtI })
	if moved != 0 || got[0] != 1 || got[1] != 2 || got[3] != 4 {
		t.Fatalf("staircase: got %v, %d moved", got, moved)
	}
}

// TestStaircaseKeepsOwnReadings: the tanh loop driven as the engine drives
// it, one setpoint per sample, each setting complete before the sample's
// readings; the current read 400 µs after the flux (0.4 of the 1 ms
// spacing). Every channel of a sample saw the same level, so the figures
// must equal those of the same samples without offsets, exactly;
// interpolating across the steps would have moved H by 0.4 of a step.
func TestStaircaseKeepsOwnReadings(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 3000, Dt: 1e-3, Start: "tip", Draw: 4}
	tt, h, b := sw.Generate(soft)
	bn := bench{s: ringSetup(), hold: 200}
	plain := bn.raw(tt, h, b, 1e-3)
	skewed := append([]record.Sample(nil), plain...)
	for i := range plain {
		plain[i].Setpoint = plain[i].I // the level set for this sample
		skewed[i].Setpoint = plain[i].I
		skewed[i].DtI = 400 * time.Microsecond
	}
	_, want, _, err := Loop(plain, bn.s)
	if err != nil {
		t.Fatal(err)
	}
	_, got, cs, err := Loop(skewed, bn.s)
	if err != nil {
		t.Fatal(err)
	}
	wm, gm := figs(want), figs(got)
	for _, name := range []string{loop.FigHcB, loop.FigBr, loop.FigHmax} {
		if gm[name].Value != wm[name].Value {
			t.Errorf("%s %.6g with offsets, %.6g without", name, gm[name].Value, wm[name].Value)
		}
	}
	if c, ok := corrs(cs)["time-alignment"]; !ok || c.Size != 400e-6 {
		t.Errorf("time-alignment %+v", c)
	}
}
