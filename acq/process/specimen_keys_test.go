package process

import (
	"fmt"
	"math"
	"testing"

	"hystd/acq/config"
	"hystd/acq/config/configtest"
	"hystd/calib/loop"
	"hystd/calib/synth"
	"hystd/calib/units"
)

func ptr(v float64) *float64 { return &v }

// samples returns the shipped fixture and ring R17 (50/40/10 mm, mean path).
func samples(t *testing.T) (config.Fixture, config.Specimen) { return configtest.Ring(t) }

// TestSpecimenTolerances: the specimen's tolerances block drives the
// geometry's share of the budget as the law of propagation of uncertainty
// says (GUM 5.1.2; for products and quotients the relative form, GUM 5.1.6),
// with a half-width a read as a rectangular distribution, u = a/√3 (GUM 4.3.7):
//   - ring, mean path l = π(D+d)/2, A = h·(D−d)/2 (IEC 60404-4), every length
//     with u: u(l)/l = √2·u/(D+d), u(A)/A = √((u/h)² + 2u²/(D−d)²);
//   - Epstein, A = m/(4·l·ρ) (IEC 60404-2): u(A)/A = √((u_m/m)² + (u_l/l)² + (u_ρ/ρ)²).
func TestSpecimenTolerances(t *testing.T) {
	fx, ring := samples(t)
	epstein := config.Specimen{Kind: "specimen", ID: "E-305", Material: "x", Class: "soft", Shape: "epstein",
		Epstein: &config.Epstein{StripLengthM: 0.305, Strips: 28}, DensityKgM3: 7650, MassKg: 1.02}
	const D, d, h = 50e-3, 40e-3, 10e-3
	ringU := func(a float64) (path, area float64) {
		u := a * 1e-3 / math.Sqrt(3)
		return math.Sqrt2 * u / (D + d), math.Sqrt(u*u/(h*h) + 2*u*u/((D-d)*(D-d)))
	}
	epsteinU := func(aLen, aMass, pctRho float64) float64 {
		ul, um := aLen*1e-3/math.Sqrt(3)/0.305, aMass*1e-3/math.Sqrt(3)/1.02
		return math.Sqrt(ul*ul + um*um + pctRho*pctRho/1e4)
	}
	rp0, ra0 := ringU(config.DefaultLengthTolMM)
	rp1, ra1 := ringU(0.1)
	tests := []struct {
		name            string
		sp              config.Specimen
		tol             *config.Tolerances
		wantPath, wantA float64
	}{
		{"ring, defaults (caliper ±0.02 mm)", ring, nil, rp0, ra0},
		{"ring, ±0.1 mm", ring, &config.Tolerances{LengthMM: ptr(0.1)}, rp1, ra1},
		{"ring, exact dimensions", ring, &config.Tolerances{LengthMM: ptr(0)}, 0, 0},
		{"epstein, defaults", epstein, nil, 0, epsteinU(0.02, 0.01, 0.5)},
		{"epstein, balance ±1 g", epstein, &config.Tolerances{MassG: ptr(1)}, 0, epsteinU(0.02, 1, 0.5)},
		{"epstein, density 2 %", epstein, &config.Tolerances{DensityPct: ptr(2)}, 0, epsteinU(0.02, 0.01, 2)},
		{"epstein, all exact", epstein, &config.Tolerances{LengthMM: ptr(0), MassG: ptr(0), DensityPct: ptr(0)}, 0, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			sp := tc.sp
			sp.Tolerances = tc.tol
			s, _, err := SetupFrom(fx, sp)
			if err != nil {
				t.Fatal(err)
			}
			// 1e-6: the geometry differentiates numerically (central
			// differences; exact for these linear factors up to rounding).
			for _, c := range []struct {
				what      string
				got, want float64
			}{{"u(l)/l", s.RelUPath, tc.wantPath}, {"u(A)/A", s.RelUArea, tc.wantA}} {
				if math.Abs(c.got-c.want) > 1e-6*c.want+1e-15 {
					t.Errorf("%s = %.9g, want %.9g", c.what, c.got, c.want)
				}
			}
		})
	}
}

// TestSpecimenToleranceReachesFigures: a ±1 mm ruler on ring R17 gives
// u(A)/A = 10 % (formula above), which dominates U(Bmax) = 2·u(Bmax)
// (B = ψ/(N2·A)); with the default caliper it is 0.19 %.
func TestSpecimenToleranceReachesFigures(t *testing.T) {
	fx, sp := samples(t)
	sw := synth.Sweep{Hm: 1000, Cycles: 1, PerBranch: 2000, Start: "tip"}
	tt, hh, bb := sw.Generate(soft)
	relU := func(tol *config.Tolerances) (float64, float64) {
		sp.Tolerances = tol
		s, _, err := SetupFrom(fx, sp)
		if err != nil {
			t.Fatal(err)
		}
		bn := bench{s: s}
		_, fs, _, err := Loop(bn.raw(tt, hh, bb, 1e-3), s)
		if err != nil {
			t.Fatal(err)
		}
		f := figs(fs)[loop.FigBmax]
		return f.U / f.Value, s.RelUArea
	}
	u0, a0 := relU(nil)
	u1, a1 := relU(&config.Tolerances{LengthMM: ptr(1)})
	if math.Abs(a1-0.1) > 1e-6 {
		t.Fatalf("u(A)/A = %g, want 0.1", a1)
	}
	// U(Bmax) is at least 2·u(A)/A and, the other sources being far
	// smaller, not 1 % above it.
	if !(u1 >= 2*a1*(1-1e-9) && u1 <= 2*a1*1.01) {
		t.Errorf("±1 mm: U(Bmax)/Bmax = %.4g, want 2·u(A)/A = %.4g", u1, 2*a1)
	}
	if !(u0 >= 2*a0*(1-1e-9) && u0 < u1/10) {
		t.Errorf("defaults: U(Bmax)/Bmax = %.4g, want ≥ 2·%.4g and far below %.4g", u0, a0, u1)
	}
}

// rayleigh is the Rayleigh law of the low-field region (Rayleigh 1887, in
// every magnetism handbook): initial curve B = μ0·(μi·H + ν·H²), loop
// branches B = μ0·((μi + ν·Hm)·H ± ν/2·(Hm² − H²)) (+ falling), which meet
// the initial curve at the tip. On the initial curve H(B) =
// (−μi + √D)/(2ν), D = μi² + 4νB/μ0, so μ at B = b is b/(μ0·H(b)), and
// H”(B) = −2ν/(μ0²·D^(3/2)).
type rayleigh struct{ mui, nu, hm float64 }

func (r rayleigh) B(h float64, dir int) float64 {
	if dir == 0 {
		return units.Mu0 * (r.mui*h + r.nu*h*math.Abs(h))
	}
	return units.Mu0 * ((r.mui+r.nu*r.hm)*h - float64(dir)*r.nu/2*(r.hm*r.hm-h*h))
}

func (r rayleigh) h(b float64) float64 {
	return (-r.mui + math.Sqrt(r.mui*r.mui+4*r.nu*b/units.Mu0)) / (2 * r.nu)
}

// TestSpecimenMuInitialLevel: mu_initial_b_mt moves the level at which
// μ_initial is read on a Rayleigh initial curve (μi 500, ν 5 m/A: μ rises
// from 515 at 2 mT to 627 at 20 mT). μ_initial is a straight-line fit of H on
// B over ±50 % of the level (calib/loop); on a curve its value at the level
// is off by about H”·var(B)/2 with var(B) = (b/2)²/3 over the window, which
// the check allows twice over, plus 1e-4 for the sampling.
func TestSpecimenMuInitialLevel(t *testing.T) {
	fx, sp := samples(t)
	ray := rayleigh{mui: 500, nu: 5, hm: 100}
	sw := synth.Sweep{Hm: ray.hm, Cycles: 1, PerBranch: 20000, Dt: 1e-4, Start: "initial"}
	tt, hh, bb := sw.Generate(ray)
	got := map[float64]float64{}
	for _, mt := range []float64{0, 2, 4, 20} {
		sp.MuInitialBmT = mt
		s, _, err := SetupFrom(fx, sp)
		if err != nil {
			t.Fatal(err)
		}
		s.Drift = DriftDemagStart
		bn := bench{s: s, hold: 2000}
		_, fs, _, err := Loop(bn.raw(tt, hh, bb, 1e-4), s)
		if err != nil {
			t.Fatal(err)
		}
		b := mt * 1e-3
		if mt == 0 {
			b = config.DefaultMuInitialBmT * 1e-3
		}
		want := b / (units.Mu0 * ray.h(b))
		d := ray.mui*ray.mui + 4*ray.nu*b/units.Mu0
		h2 := 2 * ray.nu / (units.Mu0 * units.Mu0 * math.Pow(d, 1.5))
		bias := h2 * (b * b / 12) / 2 / ray.h(b)
		within(t, fmt.Sprintf("mu_initial_b_mt %g", mt), loop.FigMuInitial, figs(fs), want, 2*bias+1e-4)
		got[mt] = figs(fs)[loop.FigMuInitial].Value
		t.Logf("%g mT: μ_initial %.6g, exact %.6g (rel %.2g, bias bound %.2g)", b*1e3, got[mt], want, got[mt]/want-1, bias)
	}
	if got[0] != got[4] {
		t.Errorf("default level: %v, 4 mT: %v", got[0], got[4])
	}
	if float64(DefaultMuInitialB) != config.DefaultMuInitialBmT*1e-3 {
		t.Errorf("process default %v T, config default %v mT", DefaultMuInitialB, config.DefaultMuInitialBmT)
	}
}
