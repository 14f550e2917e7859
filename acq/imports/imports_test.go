package imports

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"

	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/record"
	"hystd/acq/store/memstore"
	"hystd/calib/units"
)

// The exact case: a soft loop with branches B = Bs·tanh((H ± Hc)/a)
// (falling branch +Hc, rising −Hc), driven by I on a winding of N1 turns
// over the path l (H = N1·I/l) and read by an integrator on N2 turns
// around the area A (ψ = N2·A·B), with a constant integrator offset Vos
// (ψ grows by Vos·t: REFERENCE §5, Arpaia et al. 2022) and an arbitrary
// start level ψ0. Its figures follow in closed form (derived here):
//   - Hmax = Hm (the tips of the sweep);
//   - Bmax = Bs·tanh((Hm − Hc)/a) at both tips (the other branch differs
//     there by Bs·(tanh 22 − tanh 18) < 1e-15 T);
//   - Br = Bs·tanh(Hc/a) (falling branch at H = 0);
//   - HcB = Hc (B = 0 where H ± Hc = 0);
//   - HcJ = x with J = B − μ0·H = 0 at H = −x: x = Hc + a·atanh(μ0·x/Bs);
//   - μa = Bmax/(μ0·Hm);
//   - loss W = ∫(B_fall − B_rise) dH over [−Hm, Hm]
//     = Bs·a·[ln cosh((H+Hc)/a) − ln cosh((H−Hc)/a)] from −Hm to Hm
//     = 2·Bs·a·(ln cosh((Hm+Hc)/a) − ln cosh((Hm−Hc)/a)).
//
// Tolerances are the product's metrology bar (PRODUCT.md): 0.1 %, 0.5 % for
// the loss.
const (
	bs, hc, aa, hm = 1.5, 100.0, 50.0, 1000.0 // T, A/m, A/m, A/m
	n1, lPath      = 100, 0.1                 // turns, m (fixture and specimen of testdata)
	n2, area       = 50, 50e-6                // turns, m²
	vos            = 20e-6                    // V: 1.2 mV·s over the 60 s sweep, 0.48 T of B
	psi0           = 3e-4                     // Wb-turns at t = 0
	dt             = 0.005                    // s
	perHm          = 2000                     // samples per Hm of sweep
	holdN          = 400                      // samples per hold (2 s)
)

func lnCosh(x float64) float64 {
	x = math.Abs(x)
	return x - math.Ln2 + math.Log1p(math.Exp(-2*x))
}

func exactFigures() map[string]float64 {
	x := hc
	for range 50 {
		x = hc + aa*math.Atanh(units.Mu0*x/bs)
	}
	bmax := bs * math.Tanh((hm-hc)/aa)
	return map[string]float64{
		"Hmax": hm, "Bmax": bmax, "Br": bs * math.Tanh(hc/aa), "HcB": hc, "HcJ": x,
		"mu_a": bmax / (units.Mu0 * hm), "loss_j_m3": 2 * bs * aa * (lnCosh((hm+hc)/aa) - lnCosh((hm-hc)/aa)),
	}
}

// synth writes the raw recording: hold at H = 0 on the falling branch,
// sweep 0 → −Hm → +Hm → −Hm → 0, hold at H = 0 on the rising branch; I in
// mA and ψ in µV·s (header units), noise σ on ψ (V·s) and on I (A).
func synth(labels bool, noisePsi, noiseI float64) string {
	rng := rand.New(rand.NewPCG(15, 2026))
	var b strings.Builder
	b.WriteString("t (s),I (mA),psi (uV s)")
	if labels {
		b.WriteString(",phase")
	}
	b.WriteString("\n")
	k := 0
	row := func(h float64, dir int, phase string) {
		t := float64(k) * dt
		k++
		var bb float64
		if dir < 0 {
			bb = bs * math.Tanh((h+hc)/aa)
		} else {
			bb = bs * math.Tanh((h-hc)/aa)
		}
		i := h*lPath/n1 + noiseI*rng.NormFloat64()
		psi := psi0 + n2*area*bb + vos*t + noisePsi*rng.NormFloat64()
		fmt.Fprintf(&b, "%s,%s,%s", strconv.FormatFloat(t, 'g', -1, 64),
			strconv.FormatFloat(i*1e3, 'g', -1, 64), strconv.FormatFloat(psi*1e6, 'g', -1, 64))
		if labels {
			b.WriteString("," + phase)
		}
		b.WriteString("\n")
	}
	for range holdN {
		row(0, -1, "pre")
	}
	seg := func(from, to float64, dir int) {
		n := int(math.Round(math.Abs(to-from) / hm * perHm))
		for j := 1; j <= n; j++ {
			row(from+(to-from)*float64(j)/float64(n), dir, "sweep")
		}
	}
	seg(0, -hm, -1)
	seg(-hm, hm, +1)
	seg(hm, -hm, -1)
	seg(-hm, 0, +1)
	for range holdN {
		row(0, +1, "post")
	}
	return b.String()
}

func loadSetup(t *testing.T) (config.Fixture, config.Specimen) {
	t.Helper()
	fx, err := config.LoadFixture("testdata/fixture-import.yaml")
	if err != nil {
		t.Fatal(err)
	}
	sp, err := config.LoadSpecimen("testdata/specimen-direct.yaml")
	if err != nil {
		t.Fatal(err)
	}
	return fx, sp
}

var now = time.Date(2026, 3, 4, 9, 30, 0, 0, time.UTC)

func TestImportExactLoop(t *testing.T) {
	fx, sp := loadSetup(t)
	want := exactFigures()
	tol := map[string]float64{"Hmax": 1e-3, "Bmax": 1e-3, "Br": 1e-3, "HcB": 1e-3, "HcJ": 1e-3, "mu_a": 1e-3, "loss_j_m3": 5e-3}
	cases := []struct {
		name           string
		labels         bool
		noisePsi, noiI float64
	}{
		{"phase labels, no noise", true, 0, 0},
		{"holds from the current, no noise", false, 0, 0},
		// 0.1 µV·s on ψ is 40 µT of B; 10 µA on I is 0.01 A/m of H.
		{"phase labels, noise", true, 1e-7, 1e-5},
		{"holds from the current, noise", false, 1e-7, 1e-5},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			st := memstore.New(func() time.Time { return now })
			data := []byte(synth(c.labels, c.noisePsi, c.noiI))
			run, loops, err := Import(context.Background(), Options{File: "/x/old-rig/r1.csv", Data: data,
				Fixture: fx, Specimen: sp, Software: "test", Now: now, Writer: st})
			if err != nil {
				t.Fatal(err)
			}
			if len(loops) != 1 {
				t.Fatalf("%d loops, want 1", len(loops))
			}
			got := map[string]float64{}
			for _, f := range loops[0].Figures {
				got[f.Name] = f.Value
			}
			for name, w := range want {
				g, ok := got[name]
				if !ok {
					t.Errorf("%s: not reported", name)
					continue
				}
				if rel := math.Abs(g-w) / math.Abs(w); !(rel <= tol[name]) {
					t.Errorf("%s = %.7g, exact %.7g (rel. error %.2g > %g)", name, g, w, rel, tol[name])
				}
			}
			// The drift was measured from the holds and removed: the baseline
			// at the end of the sweep is Vos·T_sweep (1.2 mV·s = 0.48 T).
			var base float64
			for _, co := range loops[0].Corrections {
				if co.Name == "drift-baseline" {
					base = co.Size
				}
			}
			sweepT := 6 * perHm * dt
			if wantB := vos * sweepT / (n2 * area); math.Abs(math.Abs(base)-wantB) > 0.01*wantB {
				t.Errorf("drift baseline %.5g T, want %.5g T (Vos·T/(N2·A))", base, wantB)
			}
			stored, err := st.Run(context.Background(), run.ID)
			if err != nil {
				t.Fatal(err)
			}
			if stored.State != record.Finished || !strings.Contains(stored.RecipeText, "imported from r1.csv (sha256 ") {
				t.Errorf("stored run %q state %s, provenance %q", stored.ID, stored.State, stored.RecipeText)
			}
			if l, err := st.Loop(context.Background(), run.ID, 1); err != nil || len(l.Raw) != 2*holdN+6*perHm {
				t.Errorf("stored loop: %d raw samples, err %v", len(l.Raw), err)
			}
		})
	}
}

func TestImportBadInputStoresNothing(t *testing.T) {
	fx, sp := loadSetup(t)
	cases := []struct{ file, want string }{
		{"bad-phase.csv", "bad-phase.csv:5: column phase: \"hold\": want pre, sweep or post"},
		{"bad-number.csv", "bad-number.csv:4: column I: \"1x\" is not a finite number"},
		{"no-psi.csv", "no-psi.csv:1: header has no column \"psi\""},
		{"backwards.csv", "backwards.csv:4: column t: time 0.1 s runs backwards"},
		{"bad-unit.csv", "bad-unit.csv:1: column I: unit \"T\" is not a unit of A"},
	}
	for _, c := range cases {
		t.Run(c.file, func(t *testing.T) {
			data, err := readFile("testdata/" + c.file)
			if err != nil {
				t.Fatal(err)
			}
			st := memstore.New(func() time.Time { return now })
			_, _, err = Import(context.Background(), Options{File: "testdata/" + c.file, Data: data,
				Fixture: fx, Specimen: sp, Now: now, Writer: st})
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want one containing %q", err, c.want)
			}
			if runs, _ := st.Runs(context.Background(), record.RunFilter{}); len(runs) != 0 {
				t.Errorf("%d runs stored after a bad file", len(runs))
			}
		})
	}
}

func TestReadRawUnits(t *testing.T) {
	// 1 mA = 1e-3 A, 1 µV·s = 1e-6 Wb-turns, 1 ms = 1e-3 s (SI prefixes).
	r, err := ReadRaw(strings.NewReader("t (ms);I (mA);psi (uV s);B_probe (mT);temp (°C)\n0;1500;250;20;23\n5;-1500;-250;-20;23.5\n"), "u.csv")
	if err != nil {
		t.Fatal(err)
	}
	s := r.Samples[1]
	if s.T != 5*time.Millisecond || math.Abs(s.I+1.5) > 1e-15 || math.Abs(s.Psi+250e-6) > 1e-18 ||
		math.Abs(s.BProbe+0.02) > 1e-15 || s.TempC != 23.5 {
		t.Errorf("sample %+v", s)
	}
}

func readFile(p string) ([]byte, error) { return os.ReadFile(p) }

// TestImportCalibration: an integrator calibration of gain g divides ψ, and
// so B, by g (true ψ = reading/gain): Bmax, Br, μa and the loss (∮H dB) of
// the calibrated import are those of the plain import divided by g, HcB and
// HcJ-free figures of H unchanged; its uncertainty u(g)/g enters the budget
// of B; a record past due at the import's time adds a warning event.
func TestImportCalibration(t *testing.T) {
	fx, sp := loadSetup(t)
	data := []byte(synth(true, 0, 0))
	imp := func(files ...string) (record.Run, []record.Loop, *memstore.Store) {
		t.Helper()
		var cals []calrec.Record
		for _, f := range files {
			r, err := calrec.Load("../calrec/testdata/" + f)
			if err != nil {
				t.Fatal(err)
			}
			cals = append(cals, r)
		}
		st := memstore.New(func() time.Time { return now })
		run, loops, err := Import(context.Background(), Options{File: "r.csv", Data: data, Fixture: fx, Specimen: sp,
			Now: now, Writer: st, Calibrations: cals})
		if err != nil {
			t.Fatal(err)
		}
		return run, loops, st
	}
	fig := func(l record.Loop, n string) record.Figure {
		for _, f := range l.Figures {
			if f.Name == n {
				return f
			}
		}
		t.Fatalf("no %s", n)
		return record.Figure{}
	}
	_, plain, _ := imp()
	run, cal, st := imp("integrator-ok.yaml") // gain 1.01 ± 0.002
	const g = 1.01
	for _, n := range []string{"Bmax", "Br", "mu_a", "loss_j_m3"} {
		p, c := fig(plain[0], n).Value, fig(cal[0], n).Value
		if rel := math.Abs(c-p/g) / (p / g); rel > 1e-9 {
			t.Errorf("%s: calibrated %.10g, plain/g %.10g (rel %.2g)", n, c, p/g, rel)
		}
	}
	for _, n := range []string{"Hmax", "HcB"} {
		p, c := fig(plain[0], n).Value, fig(cal[0], n).Value
		if rel := math.Abs(c-p) / p; rel > 1e-9 {
			t.Errorf("%s: calibrated %.10g, plain %.10g", n, c, p)
		}
	}
	// u(g)/g = 0.002/1.01 ≈ 0.2 % of Br as a standard uncertainty: U (k = 2)
	// of Br at least 2·0.00198·Br.
	br := fig(cal[0], "Br")
	if min := 2 * 0.002 / g * br.Value; !(br.U >= min) || !strings.Contains(br.Note, "integrator gain (calibration)") {
		t.Errorf("Br U %.3g (want ≥ %.3g), note %q", br.U, min, br.Note)
	}
	evs, _ := st.Events(context.Background(), run.ID)
	if !hasEvent(evs, "info", "used calibration CAL-INT-07") || hasEvent(evs, "warn", "past due") {
		t.Errorf("events %v", evs)
	}
	run, _, st = imp("integrator-expired.yaml") // due 2025-03-11, import 2026-03-04
	evs, _ = st.Events(context.Background(), run.ID)
	if !hasEvent(evs, "warn", "calibration CAL-INT-03 is past due (due 2025-03-11)") {
		t.Errorf("no past-due warning: %v", evs)
	}
}

func hasEvent(evs []record.Event, level, text string) bool {
	for _, e := range evs {
		if e.Level == level && strings.Contains(e.Text, text) {
			return true
		}
	}
	return false
}
