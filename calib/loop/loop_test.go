package loop

import (
	"math"
	"testing"

	"hystd/calib/synth"
	"hystd/calib/units"
)

func figMap(fs []Figure) map[string]Figure {
	m := map[string]Figure{}
	for _, f := range fs {
		m[f.Name] = f
	}
	return m
}

type want struct {
	name  string
	value float64
	tol   float64 // relative
}

func checkFigures(t *testing.T, label string, tt, h, b []float64, opt Options, wants []want) map[string]Figure {
	t.Helper()
	s, err := Detect(h)
	if err != nil {
		t.Fatalf("%s: %v", label, err)
	}
	fs, err := Figures(tt, h, b, s, opt)
	if err != nil {
		t.Fatalf("%s: %v", label, err)
	}
	m := figMap(fs)
	for _, w := range wants {
		f, ok := m[w.name]
		if !ok {
			t.Errorf("%s: %s missing", label, w.name)
			continue
		}
		if e := math.Abs(f.Value-w.value) / math.Abs(w.value); !(e <= w.tol) {
			t.Errorf("%s: %s = %.6g, want %.6g (rel err %.2g > %.2g; U = %.2g)", label, w.name, f.Value, w.value, e, w.tol, f.U)
		}
		if math.IsNaN(f.U) || f.U < 0 {
			t.Errorf("%s: %s has U = %v", label, w.name, f.U)
		}
	}
	return m
}

// The tanh loop: Bs = 1.5 T, Hc = 50 A/m, A = 40 A/m, tips at ±1000 A/m
// ((Hm − Hc)/A = 23.75, deep in saturation). Exact figures from
// synth.Tanh's closed forms: Br = 1.5·tanh(1.25), HcB = 50 A/m, HcJ from the
// fixed point, W = 2·Bs·A·(lncosh(26.25) − lncosh(23.75)) ≈ 4·Bs·Hc = 300 J/m³.
var tanhLoop = synth.Tanh{Bs: 1.5, Hc: 50, A: 40, Ai: 60}

// tanhBHmax is the (BH)max of tanhLoop: the maximum of −H·1.5·tanh((H+50)/40)
// on −50 ≤ H ≤ 0, at H = −27.52060 A/m (root of the derivative, computed with
// mpmath at 30 digits, outside this project).
const tanhBHmax = 21.03050232058938

func tanhWants(tol float64) []want {
	l := tanhLoop
	bmax := l.Bs * math.Tanh((1000-l.Hc)/l.A)
	return []want{
		{FigHmax, 1000, 1e-3},
		{FigBmax, bmax, 1e-3},
		{FigBr, l.Br(), tol},
		{FigHcB, l.Hc, tol},
		{FigHcJ, l.HcJ(), tol},
		{FigMuA, bmax / (units.Mu0 * 1000), 2e-3},
		{FigLossJM3, l.Loss(1000), tol},
	}
}

func TestTanhClean(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 4000, Start: "tip"}
	tt, h, b := sw.Generate(tanhLoop)
	checkFigures(t, "tanh clean", tt, h, b, Options{}, tanhWants(1e-3))
}

// TestTanhNoisy adds white noise (0.5 mT on B, 0.2 A/m on H), ±50 % jitter of
// the sample interval, a partial first branch from H = 0 and three cycles.
func TestTanhNoisy(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 3, PerBranch: 5000, Start: "zero", Uneven: 0.5,
		NoiseH: 0.2, NoiseB: 0.5e-3, Draw: 3}
	tt, h, b := sw.Generate(tanhLoop)
	m := checkFigures(t, "tanh noisy", tt, h, b, Options{Density: 7650}, tanhWants(5e-3))
	if f := m[FigLossJKg]; math.Abs(f.Value-tanhLoop.Loss(1000)/7650) > 5e-3*f.Value {
		t.Errorf("loss per kg %v", f.Value)
	}
	if m[FigBr].U == 0 {
		t.Error("noisy loop: U(Br) = 0")
	}
	t.Logf("noisy tanh: Br %.5f ± %.2g T, HcB %.3f ± %.2g A/m, W %.2f ± %.2g J/m³",
		m[FigBr].Value, m[FigBr].U, m[FigHcB].Value, m[FigHcB].U, m[FigLossJM3].Value, m[FigLossJM3].U)
}

// TestParallelogram: Bs = 1.2 T, Hc = 80 A/m, slope S = 0.01 T/(A/m), tips at
// ±600 A/m (beyond Hc + Bs/S = 200). Exact (synth.Para): Br = S·Hc = 0.8 T,
// HcB = 80 A/m, HcJ = S·Hc/(S − μ0), W = 4·Hc·Bs = 384 J/m³.
func TestParallelogram(t *testing.T) {
	l := synth.Para{Bs: 1.2, Hc: 80, S: 0.01}
	for _, tc := range []struct {
		name string
		sw   synth.Sweep
		tol  float64
	}{
		{"clean", synth.Sweep{Hm: 600, Cycles: 1, PerBranch: 3000, Start: "tip"}, 2e-3},
		{"noisy uneven", synth.Sweep{Hm: 600, Cycles: 2, PerBranch: 4000, Start: "zero", Uneven: 0.6,
			NoiseH: 0.1, NoiseB: 1e-3, Draw: 11}, 5e-3},
	} {
		tt, h, b := tc.sw.Generate(l)
		checkFigures(t, "parallelogram "+tc.name, tt, h, b, Options{}, []want{
			{FigHmax, 600, 1e-3}, {FigBmax, 1.2, 1e-3},
			{FigBr, 0.8, tc.tol}, {FigHcB, 80, tc.tol}, {FigHcJ, 0.01 * 80 / (0.01 - units.Mu0), tc.tol},
			{FigLossJM3, 4 * 80 * 1.2, tc.tol},
		})
	}
}

// TestStraightLineMagnet is REFERENCE §10 item 12: Br = 1.30 T,
// μ_rec = 1.05 → HcB = Br/(μ0·μ_rec) = 985.2 kA/m and
// (BH)max = Br²/(4·μ0·μ_rec) = 320.2 kJ/m³ at B = 0.65 T. The polarization
// switches at Hsw = 1.2 MA/m, so HcJ = Hk = 1.2 MA/m, squareness 1 and
// W = 4·Br·Hsw (derivation in synth.Magnet).
func TestStraightLineMagnet(t *testing.T) {
	l := synth.Magnet{Br: 1.3, MuRec: 1.05, Hsw: 1.2e6}
	for _, tc := range []struct {
		name string
		sw   synth.Sweep
		tol  float64
	}{
		{"clean", synth.Sweep{Hm: 2e6, Cycles: 1, PerBranch: 4000, Start: "tip"}, 1e-3},
		{"noisy", synth.Sweep{Hm: 2e6, Cycles: 2, PerBranch: 6000, Start: "zero", Uneven: 0.4,
			NoiseH: 200, NoiseB: 1e-3, Draw: 5}, 5e-3},
	} {
		// The polarization switches between two samples; bins of H resolve
		// that to about one bin, 2·Hm/nb = 4e6/1000 A/m (0.33 % of Hk).
		kneeTol := math.Max(tc.tol, 4e-3)
		tt, h, b := tc.sw.Generate(l)
		m := checkFigures(t, "magnet "+tc.name, tt, h, b, Options{}, []want{
			{FigBr, 1.3, tc.tol},
			{FigHcB, 985.2e3, tc.tol},
			{FigBHmax, 320.2e3, tc.tol},
			{FigBHmaxB, 0.65, 2 * tc.tol},
			{FigBHmaxH, 1.3 / (2 * units.Mu0 * 1.05), 2 * tc.tol},
			{FigHcJ, 1.2e6, tc.tol},
			{FigHk, 1.2e6, kneeTol},
			{FigSquareness, 1, kneeTol},
			{FigMuRec, 1.05, 2 * tc.tol},
			{FigLossJM3, 4 * 1.3 * 1.2e6, tc.tol},
		})
		t.Logf("magnet %s: BHmax %.1f ± %.2g J/m³, HcB %.0f ± %.2g A/m", tc.name,
			m[FigBHmax].Value, m[FigBHmax].U, m[FigHcB].Value, m[FigHcB].U)
	}
}

// TestRectangle is REFERENCE §10 item 13: the ideal rectangular loop of
// Hc = 100 A/m, Bs = 1 T has W = 4·Hc·Bs = 400 J/m³ (textbook). The path is
// sampled along its edges, the vertical sides included.
func TestRectangle(t *testing.T) {
	verts := [][2]float64{{500, 1}, {-100, 1}, {-100, -1}, {-500, -1}, {100, -1}, {100, 1}, {500, 1}}
	var tt, h, b []float64
	for k := 0; k+1 < len(verts); k++ {
		for i := 0; i < 500; i++ {
			f := float64(i) / 500
			h = append(h, verts[k][0]+f*(verts[k+1][0]-verts[k][0]))
			b = append(b, verts[k][1]+f*(verts[k+1][1]-verts[k][1]))
			tt = append(tt, float64(len(tt))*1e-3)
		}
	}
	h, b, tt = append(h, 500), append(b, 1), append(tt, float64(len(tt))*1e-3)
	checkFigures(t, "rectangle", tt, h, b, Options{}, []want{
		{FigLossJM3, 400, 1e-12}, {FigBr, 1, 1e-9}, {FigHcB, 100, 2e-2},
	})
}

// TestMuInitial: the initial curve of synth.Tanh is B = Bs·tanh(H/Ai), so at
// B = 4 mT μ_initial = b/(μ0·Ai·atanh(b/Bs)) (≈ 1.33e4 for Ai = 60 A/m... of
// order Bs/(μ0·Ai)).
func TestMuInitial(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 1, PerBranch: 20000, Start: "initial"}
	tt, h, b := sw.Generate(tanhLoop)
	mui := tanhLoop.MuInitial(4e-3)
	checkFigures(t, "initial", tt, h, b, Options{InitialCurve: true, MuInitialB: 4e-3}, []want{{FigMuInitial, mui, 2e-2}})
	// Without the flag the first piece is not taken as an initial curve.
	s, _ := Detect(h)
	fs, _ := Figures(tt, h, b, s, Options{MuInitialB: 4e-3})
	if _, ok := figMap(fs)[FigMuInitial]; ok {
		t.Error("μ_initial given without an initial curve")
	}
}

func TestDetect(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 1000, Start: "zero", NoiseH: 5, Draw: 1}
	_, h, _ := sw.Generate(tanhLoop)
	s, err := Detect(h)
	if err != nil {
		t.Fatal(err)
	}
	// 0 → +Hm (partial), then 4 complete branches.
	if len(s.Segments) != 5 || s.Segments[4].End < len(h)-3 || s.Segments[0].Complete || !s.Segments[0].Initial || len(s.Complete()) != 4 {
		t.Fatalf("segments %+v", s.Segments)
	}
	if len(s.Cycles()) != 2 {
		t.Errorf("cycles %d, want 2", len(s.Cycles()))
	}
	lab := s.Labels(nil)
	if lab[0] != Initial || lab[len(lab)/2] == Initial {
		t.Errorf("labels: first %d, middle %d", lab[0], lab[len(lab)/2])
	}
	// A single monotone sweep is one complete branch, but no cycle.
	if s, err := Detect([]float64{-3, -1, 1, 3}); err != nil || len(s.Complete()) != 1 || len(s.Cycles()) != 0 {
		t.Errorf("single sweep: %+v, %v", s, err)
	}
	for _, bad := range [][]float64{{1, 2}, {1, 1, 1, 1}, {0, math.NaN(), 1}} {
		if _, err := Detect(bad); err == nil {
			t.Errorf("Detect(%v) accepted", bad)
		}
	}
	if _, err := Figures(nil, []float64{0, 1, 0.5}, []float64{0, 1, 0}, Shape{N: 3}, Options{}); err == nil {
		t.Error("no complete branch accepted")
	}
}

// TestSources: a relative path-length uncertainty u_l scales H by (1 − u_l),
// so the HcB component equals HcB·u_l, and Br (read at H = 0) is unchanged.
func TestSources(t *testing.T) {
	sw := synth.Sweep{Hm: 1000, Cycles: 1, PerBranch: 4000, Start: "tip"}
	tt, h, b := sw.Generate(tanhLoop)
	s, _ := Detect(h)
	fs, err := Figures(tt, h, b, s, Options{Sources: []Source{{Name: "path", HScale: -1e-3}}})
	if err != nil {
		t.Fatal(err)
	}
	m := figMap(fs)
	var got float64
	for _, c := range m[FigHcB].Budget.Components {
		if c.Name == "path" {
			got = c.U
		}
	}
	if math.Abs(got-m[FigHcB].Value*1e-3) > 1e-9*m[FigHcB].Value {
		t.Errorf("path component of HcB %g, want %g", got, m[FigHcB].Value*1e-3)
	}
	for _, c := range m[FigBr].Budget.Components {
		if c.Name == "path" && c.U > 1e-12 {
			t.Errorf("path component of Br %g, want 0", c.U)
		}
	}
}

// TestRecoil: a demagnetization curve of the straight-line magnet
// (synth.Magnet, Br 1.3 T, μ_rec 1.05) from +2 MA/m down to −0.6 MA/m, then
// a recoil piece up to H = 0 and back, on the recoil line
// B = Br + μ0·μ_rec·H. The recoil slope gives μ_rec = 1.05 exactly; Br and
// (BH)max = Br²/(4·μ0·μ_rec) (REFERENCE §10 item 12) come from the falling
// branch.
func TestRecoil(t *testing.T) {
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
	add(0, -0.6e6, 600, true)
	checkFigures(t, "recoil", tt, h, b, Options{}, []want{
		{FigMuRec, 1.05, 1e-9}, {FigBr, 1.3, 1e-6}, {FigBHmax, 320.2e3, 1e-3},
	})
	// B stays above 0.51 T down to −0.6 MA/m (1.3 T − μ0·1.05·0.6 MA/m):
	// no coercivity may be reported.
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
			t.Errorf("recoil: %s = %g reported, but B and J never reach 0", f.Name, f.Value)
		}
	}
}

// TestCoverage repeats the noisy tanh loop with 40 noise draws: the exact
// value must lie within the expanded uncertainty (k = 2, ≈ 95 % for a
// normal distribution, GUM §6.2) in most runs. Noise and sampling are the
// only budget components here, so this checks their evaluation.
func TestCoverage(t *testing.T) {
	exact := map[string]float64{FigBr: tanhLoop.Br(), FigHcB: tanhLoop.Hc, FigHcJ: tanhLoop.HcJ(), FigLossJM3: tanhLoop.Loss(1000),
		FigHmax: 1000, FigBmax: tanhLoop.B(1000, -1), FigMuA: tanhLoop.B(1000, -1) / (units.Mu0 * 1000), FigBHmax: tanhBHmax}
	hits := map[string]int{}
	const runs = 40
	for draw := uint64(1); draw <= runs; draw++ {
		sw := synth.Sweep{Hm: 1000, Cycles: 2, PerBranch: 3000, Start: "tip", Uneven: 0.3,
			NoiseH: 0.2, NoiseB: 1e-3, Draw: 100 + draw}
		tt, h, b := sw.Generate(tanhLoop)
		s, err := Detect(h)
		if err != nil {
			t.Fatal(err)
		}
		fs, err := Figures(tt, h, b, s, Options{})
		if err != nil {
			t.Fatal(err)
		}
		for _, f := range fs {
			if want, ok := exact[f.Name]; ok && math.Abs(f.Value-want) <= f.U {
				hits[f.Name]++
			}
		}
	}
	for name := range exact {
		// 95 % coverage gives ≥ 33 of 40 with probability > 0.99 (binomial).
		t.Logf("%s: covered in %d of %d", name, hits[name], runs)
		if hits[name] < 33 {
			t.Errorf("%s: exact value within U in %d of %d runs, want ≥ 33", name, hits[name], runs)
		} else {
			t.Logf("%s: covered in %d of %d runs", name, hits[name], runs)
		}
	}
}
