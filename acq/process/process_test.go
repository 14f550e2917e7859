package process

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"syscall"
	"testing"
	"time"

	"hystd/acq/config"
	"hystd/acq/record"
	"hystd/calib/loop"
	"hystd/calib/synth"
	"hystd/calib/units"
	"hystd/drivers/profile"
)

// ringSetup is the ring 50/40/10 mm on the mean path (IEC 60404-4):
// l_m = π·45 mm, A = 50 mm², N1 = 200, N2 = 100.
func ringSetup() Setup {
	return Setup{PathLength: units.Metre(math.Pi * 0.045), Area: 50e-6, N1: 200, N2: 100, Geometry: "test ring"}
}

// bench turns an analytic loop into raw samples as the instruments would
// give them: I = H·l_m/N1, ψ = N2·A·(B − B_reset) + drift, where the
// integrator is reset at the start of the pre hold and its input offset
// V(t) = v0 + v1·t integrates to v0·t + v1·t²/2 (REFERENCE §5).
type bench struct {
	s              Setup
	hold           int     // samples per static hold (0: no holds)
	v0, v1         float64 // V, V/s
	noiseI, noiseP float64
	probe          bool // H read by a field meter instead of the current
}

func (bn bench) raw(tt, h, b []float64, dt float64) []record.Sample {
	r := rand.New(rand.NewPCG(9, 9))
	nab := float64(bn.s.N2) * float64(bn.s.Area)
	var out []record.Sample
	bReset := b[0]
	drift := func(t float64) float64 { return bn.v0*t + bn.v1*t*t/2 }
	add := func(ph record.Phase, t, hv, bv float64) {
		smp := record.Sample{T: time.Duration(t * 1e9), Phase: ph, I: math.NaN(), BProbe: math.NaN(), TempC: math.NaN(), V: math.NaN()}
		if bn.probe {
			smp.BProbe = units.Mu0*hv + bn.noiseI*r.NormFloat64()
		} else {
			smp.I = hv*float64(bn.s.PathLength)/float64(bn.s.N1) + bn.noiseI*r.NormFloat64()
		}
		smp.Psi = nab*(bv-bReset) + drift(t) + bn.noiseP*r.NormFloat64()
		out = append(out, smp)
	}
	t := 0.0
	for i := 0; i < bn.hold; i++ {
		add(record.PreHold, t, h[0], b[0])
		t += dt
	}
	t0 := t
	for i := range h {
		add(record.Sweep, t0+tt[i], h[i], b[i])
	}
	t = t0 + tt[len(tt)-1]
	last := len(h) - 1
	for i := 0; i < bn.hold; i++ {
		t += dt
		add(record.PostHold, t, h[last], b[last])
	}
	return out
}

func figs(fs []record.Figure) map[string]record.Figure {
	m := map[string]record.Figure{}
	for _, f := range fs {
		m[f.Name] = f
	}
	return m
}

func corrs(cs []record.Correction) map[string]record.Correction {
	m := map[string]record.Correction{}
	for _, c := range cs {
		m[c.Name] = c
	}
	return m
}

func within(t *testing.T, label, name string, m map[string]record.Figure, want, tol float64) {
	t.Helper()
	f, ok := m[name]
	if !ok {
		t.Errorf("%s: %s missing", label, name)
		return
	}
	if e := math.Abs(f.Value-want) / math.Abs(want); !(e <= tol) {
		t.Errorf("%s: %s = %.6g %s, want %.6g (rel err %.2g > %.2g, U %.2g)", label, name, f.Value, f.Unit, want, e, tol, f.U)
	}
	if !(f.U >= 0) {
		t.Errorf("%s: %s U = %v", label, name, f.U)
	}
}

var soft = synth.Tanh{Bs: 1.5, Hc: 50, A: 40, Ai: 60}

// TestSoftLoopWithDrift: the tanh loop of calib/loop's tests (exact figures
// derived in synth.Tanh) measured with an integrator whose offset is 10 µV
// rising by 20 nV/s, with noise, recovered through baseline, closure and
// centering. Over the ~12 s sweep the uncorrected drift is ~1.2e-4 V·s,
// i.e. 24 mT on N2·A = 5e-3 m²·turns — far above the tolerances below.
func TestSoftLoopWithDrift(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 3000, Dt: 1e-3, Start: "tip", Uneven: 0.3, Draw: 4}
	tt, h, b := sw.Generate(soft)
	for _, tc := range []struct {
		name string
		hold int
	}{{"holds", 500}, {"no holds", 0}} {
		bn := bench{s: ringSetup(), hold: tc.hold, v0: 10e-6, v1: 20e-9, noiseI: 1e-4, noiseP: 1e-6}
		bn.s.Current = Accuracy{Gain: 5e-4, Offset: 1e-3}
		bn.s.Flux = Accuracy{Gain: 1e-3, Offset: 2e-7}
		bn.s.RelUPath, bn.s.RelUArea = 1e-3, 2e-3
		raw := bn.raw(tt, h, b, 1e-3)
		pts, fs, cs, err := Loop(raw, bn.s)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		if len(pts) != len(h) {
			t.Fatalf("%s: %d points for %d sweep samples", tc.name, len(pts), len(h))
		}
		m := figs(fs)
		label := "soft " + tc.name
		within(t, label, loop.FigHmax, m, 1000, 2e-3)
		within(t, label, loop.FigBr, m, soft.Br(), 3e-3)
		within(t, label, loop.FigHcB, m, soft.Hc, 5e-3)
		within(t, label, loop.FigHcJ, m, soft.HcJ(), 5e-3)
		within(t, label, loop.FigBmax, m, 1.5, 3e-3)
		within(t, label, loop.FigLossJM3, m, soft.Loss(1000), 5e-3)
		if _, ok := m[loop.FigBHmax]; ok {
			t.Errorf("%s: a soft specimen reports BHmax", label)
		}
		// The budget must contain the geometry: U(HcB) ≥ 2·HcB·u_l.
		if u := m[loop.FigHcB].U; u < 2*soft.Hc*1e-3 {
			t.Errorf("%s: U(HcB) = %g below the path-length part %g", label, u, 2*soft.Hc*1e-3)
		}
		c := corrs(cs)
		for _, name := range []string{"geometry", "drift-baseline", "closure", "centering"} {
			if _, ok := c[name]; !ok {
				t.Errorf("%s: correction %s not recorded: %+v", label, name, cs)
			}
		}
		// Reset at the top tip: centering moves B down by about Bmax.
		if off := c["centering"].Size; math.Abs(off+1.5) > 0.05 {
			t.Errorf("%s: centering %g T, want ≈ −1.5", label, off)
		}
		if tc.hold > 0 && c["drift-baseline"].Size < 0.02 {
			t.Errorf("%s: drift baseline %g T, want the ~24 mT ramp", label, c["drift-baseline"].Size)
		}
		if tc.hold == 0 && !strings.Contains(c["drift-baseline"].Note, "no static holds") {
			t.Errorf("%s: note %q", label, c["drift-baseline"].Note)
		}
		if n := pts[len(pts)/3].Branch; n != loop.Falling && n != loop.Rising {
			t.Errorf("%s: branch label %d", label, n)
		}
	}
}

// TestMagnetFromFieldMeter: REFERENCE §10 item 12 through the whole chain,
// H from a field meter (H = B_probe/μ0), B from the integrator with drift.
func TestMagnetFromFieldMeter(t *testing.T) {
	l := synth.Magnet{Br: 1.3, MuRec: 1.05, Hsw: 1.2e6}
	sw := synth.Sweep{Hm: 2e6, Cycles: 1, PerBranch: 6000, Dt: 1e-3, Start: "tip", Draw: 2}
	tt, h, b := sw.Generate(l)
	s := Setup{Area: 100e-6, N2: 50, HFrom: HFromFieldMeter, Class: ClassMagnet,
		Field: Accuracy{Gain: 2e-3, Offset: 1e-4}}
	bn := bench{s: s, hold: 300, v0: -5e-6, noiseI: 1e-5, noiseP: 1e-6, probe: true}
	_, fs, _, err := Loop(bn.raw(tt, h, b, 1e-3), bn.s)
	if err != nil {
		t.Fatal(err)
	}
	m := figs(fs)
	within(t, "magnet", loop.FigBr, m, 1.3, 3e-3)
	within(t, "magnet", loop.FigHcB, m, 985.2e3, 3e-3)
	within(t, "magnet", loop.FigBHmax, m, 320.2e3, 3e-3)
	within(t, "magnet", loop.FigBHmaxB, m, 0.65, 1e-2)
	within(t, "magnet", loop.FigHk, m, 1.2e6, 5e-3)
	within(t, "magnet", loop.FigMuRec, m, 1.05, 1e-2)
	if _, ok := m[loop.FigMuA]; ok {
		t.Error("a magnet reports mu_a")
	}
	// The field meter's 0.2 % gain (k = 2) alone gives U(HcB) ≥ 0.1 %·2·HcB.
	if u := m[loop.FigHcB].U; u < 2*985.2e3*1e-3 {
		t.Errorf("U(HcB) = %g misses the field-meter gain", u)
	}
}

// TestDemagnetizedStart: the initial curve B = Bs·tanh(H/Ai) of synth.Tanh
// from a demagnetized state, with a drift that only the holds can remove
// (no closure on an open curve); μ_initial at 4 mT = b/(μ0·Ai·atanh(b/Bs)).
func TestDemagnetizedStart(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 1, PerBranch: 20000, Dt: 1e-4, Start: "initial"}
	tt, h, b := sw.Generate(soft)
	s := ringSetup()
	s.Drift = DriftDemagStart
	bn := bench{s: s, hold: 2000, v0: 2e-6, noiseI: 1e-6, noiseP: 1e-9}
	_, fs, cs, err := Loop(bn.raw(tt, h, b, 1e-4), bn.s)
	if err != nil {
		t.Fatal(err)
	}
	m := figs(fs)
	within(t, "demag start", loop.FigMuInitial, m, soft.MuInitial(4e-3), 3e-2)
	within(t, "demag start", loop.FigBr, m, soft.Br(), 3e-3)
	if _, ok := corrs(cs)["anchor"]; !ok {
		t.Errorf("anchor not recorded: %+v", cs)
	}
}

func TestMissingAndBadSamples(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 1, PerBranch: 1000, Start: "tip"}
	tt, h, b := sw.Generate(soft)
	bn := bench{s: ringSetup()}
	raw := bn.raw(tt, h, b, 1e-3)
	raw[100].Psi = math.NaN()
	raw[200].I = math.NaN()
	pts, _, cs, err := Loop(raw, bn.s)
	if err != nil {
		t.Fatal(err)
	}
	if len(pts) != len(raw)-2 || corrs(cs)["missing-samples"].Size != 2 {
		t.Errorf("%d points, corrections %+v", len(pts), cs)
	}
	if raw[100].Psi == raw[100].Psi {
		t.Error("raw modified")
	}
	tests := []struct {
		name string
		mod  func([]record.Sample) []record.Sample
		s    func(Setup) Setup
		msg  string
	}{
		{"no sweep", func(r []record.Sample) []record.Sample { return r[:2] }, nil, "no sweep"},
		{"unknown phase", func(r []record.Sample) []record.Sample { r[5].Phase = "ramp"; return r }, nil, "phase"},
		{"mostly missing", func(r []record.Sample) []record.Sample {
			for i := range r[:len(r)*2/3] {
				r[i].Psi = math.NaN()
			}
			return r
		}, nil, "lack"},
		{"time backwards", func(r []record.Sample) []record.Sample { r[50].T = 0; return r }, nil, "sample 50: time 0s runs backwards"},
		{"no path", nil, func(s Setup) Setup { s.PathLength = 0; return s }, "path length"},
		{"bad class", nil, func(s Setup) Setup { s.Class = "hard"; return s }, "class"},
		{"bad drift", nil, func(s Setup) Setup { s.Drift = "auto"; return s }, "drift"},
		{"constant H", func(r []record.Sample) []record.Sample {
			for i := range r {
				r[i].I = 1
			}
			return r
		}, nil, "reverse"},
	}
	for _, tc := range tests {
		r := append([]record.Sample(nil), raw...)
		r[100].Psi, r[200].I = 0, 0
		s := ringSetup()
		if tc.mod != nil {
			r = tc.mod(r)
		}
		if tc.s != nil {
			s = tc.s(s)
		}
		_, _, _, err := Loop(r, s)
		if err == nil || !strings.Contains(err.Error(), tc.msg) {
			t.Errorf("%s: error %v, want one containing %q", tc.name, err, tc.msg)
		}
	}
}

// TestSetupFromSamples: the shipped ring R17 (50/40/10 mm, mean path) on
// the shipped fixture: l_m = π·45 mm (IEC 60404-4), A = 50 mm², N1 200, N2 100.
func TestSetupFromSamples(t *testing.T) {
	fx, sp := samples(t)
	s, warn, err := SetupFrom(fx, sp)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(float64(s.PathLength)-math.Pi*0.045) > 1e-12 || math.Abs(float64(s.Area)-50e-6) > 1e-15 ||
		s.N1 != 200 || s.N2 != 100 || len(warn) != 0 || s.RelUPath <= 0 {
		t.Errorf("setup %+v, warnings %v", s, warn)
	}
	p, err := profile.Load("sim-integrator")
	if err != nil {
		t.Fatal(err)
	}
	if a, ok := p.ReadAccuracy(); ok {
		s.SetAccuracy(p.Role, Accuracy(a))
	}
	if s.Flux.Gain != 1e-3 || s.Flux.Offset != 2e-7 {
		t.Errorf("integrator accuracy %+v, want the profile's gain 1e-3, offset 2e-7", s.Flux)
	}

	bad := []struct {
		name string
		mod  func(*config.Fixture, *config.Specimen)
		msg  string
	}{
		{"no ring block", func(f *config.Fixture, s *config.Specimen) { s.Ring = nil }, "ring block"},
		{"inner > outer", func(f *config.Fixture, s *config.Specimen) { r := *s.Ring; r.InnerMM = 60; s.Ring = &r }, "ring"},
		{"small coil", func(f *config.Fixture, s *config.Specimen) { f.Winding.CoilAreaMM2 = 10 }, "coil_area_mm2"},
		{"shape", func(f *config.Fixture, s *config.Specimen) { s.Shape = "disc" }, "shape"},
		{"epstein block", func(f *config.Fixture, s *config.Specimen) { s.Shape = "epstein" }, "epstein block"},
	}
	for _, tc := range bad {
		f2, s2 := fx, sp
		tc.mod(&f2, &s2)
		if _, _, err := SetupFrom(f2, s2); err == nil || !strings.Contains(err.Error(), tc.msg) {
			t.Errorf("%s: %v, want an error naming %q", tc.name, err, tc.msg)
		}
	}
	// A wide ring is accepted with the IEC 60404-4 warning.
	sp2 := sp
	r := *sp.Ring
	r.OuterMM = 70
	sp2.Ring = &r
	if _, warn, err := SetupFrom(fx, sp2); err != nil || len(warn) != 1 {
		t.Errorf("wide ring: %v %v", warn, err)
	}
}

// BenchmarkLoop1M runs corrections and figures on a 1 M-sample loop step
// (two cycles, 250 k samples per branch, holds, drift, noise).
func BenchmarkLoop1M(b *testing.B) {
	sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 250000, Dt: 1e-5, Start: "tip", Uneven: 0.2, Draw: 1}
	tt, h, bb := sw.Generate(soft)
	bn := bench{s: ringSetup(), hold: 1000, v0: 1e-5, noiseI: 1e-4, noiseP: 1e-6}
	bn.s.Flux = Accuracy{Gain: 1e-3, Offset: 2e-7}
	bn.s.Current = Accuracy{Gain: 5e-4, Offset: 1e-3}
	raw := bn.raw(tt, h, bb, 1e-5)
	b.ReportAllocs()
	b.ResetTimer()
	cpu0 := cpuTime()
	for range b.N {
		if _, _, _, err := Loop(raw, bn.s); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric((cpuTime()-cpu0)/float64(b.N), "cpu-ns/op")
	b.ReportMetric(float64(len(raw)), "samples")
}

// TestDemagCurveFromLevel: the straight-line magnet (REFERENCE §10 item 12)
// measured as an open demagnetization curve from +2 MA/m to −0.6 MA/m and a
// recoil piece, with integrator drift; the start level is the tip B of the
// same magnet at +2 MA/m, B = Br + μ0·μ_rec·H = 1.3 + μ0·1.05·2e6 T.
func TestDemagCurveFromLevel(t *testing.T) {
	l := synth.Magnet{Br: 1.3, MuRec: 1.05, Hsw: 1.2e6}
	var tt, h, b []float64
	add := func(from, to float64, n int, line bool) {
		for i := 0; i < n; i++ {
			hv := from + (to-from)*float64(i)/float64(n)
			bv := l.B(hv, -1)
			if line {
				bv = 1.3 + units.Mu0*1.05*hv
			}
			tt, h, b = append(tt, float64(len(tt))*1e-3), append(h, hv), append(b, bv)
		}
	}
	add(2e6, -0.6e6, 2600, false)
	add(-0.6e6, 0, 600, true)
	add(0, -0.6e6, 601, true)
	s := Setup{Area: 100e-6, N2: 50, HFrom: HFromFieldMeter, Class: ClassMagnet, Drift: DriftFromLevel,
		StartB: units.Tesla(l.B(2e6, -1))}
	bn := bench{s: s, hold: 300, v0: 3e-6, noiseI: 1e-5, noiseP: 1e-7, probe: true}
	_, fs, cs, err := Loop(bn.raw(tt, h, b, 1e-3), bn.s)
	if err != nil {
		t.Fatal(err)
	}
	m := figs(fs)
	within(t, "demag curve", loop.FigBr, m, 1.3, 2e-3)
	within(t, "demag curve", loop.FigBHmax, m, 320.2e3, 3e-3)
	within(t, "demag curve", loop.FigMuRec, m, 1.05, 5e-3)
	if c := corrs(cs); !strings.Contains(c["anchor"].Note, "open curve") || c["closure"].Name != "" {
		t.Errorf("corrections %+v", cs)
	}
}

// TestLoopConcurrent runs Loop from several goroutines on shared input, as
// the engine may for several fixtures; run with -race.
func TestLoopConcurrent(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 1, PerBranch: 2000, Start: "tip"}
	tt, h, b := sw.Generate(soft)
	bn := bench{s: ringSetup(), hold: 100, v0: 1e-6}
	raw := bn.raw(tt, h, b, 1e-3)
	_, want, _, err := Loop(raw, bn.s)
	if err != nil {
		t.Fatal(err)
	}
	errs := make(chan error, 4)
	for range 4 {
		go func() {
			_, got, _, err := Loop(raw, bn.s)
			if err == nil && (len(got) != len(want) || got[0] != want[0]) {
				err = fmt.Errorf("different figures: %v vs %v", got[0], want[0])
			}
			errs <- err
		}()
	}
	for range 4 {
		if err := <-errs; err != nil {
			t.Error(err)
		}
	}
}

// TestFluxSpan: N2 = 100, A = 50 mm², Bmax = 1 T → 2·5 mV·s = 10 mV·s (the
// ψ of REFERENCE §10 item 8 from −Bmax to +Bmax).
func TestFluxSpan(t *testing.T) {
	if got := ringSetup().FluxSpan(1); math.Abs(float64(got)-0.01) > 1e-15 {
		t.Errorf("span %v, want 0.01 Wb", got)
	}
}

// cpuTime returns the user plus system CPU time of the process in ns.
func cpuTime() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return float64(ru.Utime.Nano() + ru.Stime.Nano())
}
