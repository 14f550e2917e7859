package reprocess_test

import (
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"go.yaml.in/yaml/v3"

	"hystd/acq/config"
	"hystd/acq/fixture"
	"hystd/acq/recipe"
	"hystd/acq/record"
	"hystd/acq/reprocess"
	"hystd/acq/store"
	"hystd/acq/store/memstore"
	"hystd/acq/store/storetest"
	"hystd/calib/units"
)

// The runs of ../store/testdata/v4.db (see v4-source/README.md) are imports
// of an exact loop B = Bs·tanh((H ± Hc)/a) on a direct specimen of area
// 50 mm², written by the schema-4 build.
const (
	bs, hc, aa, hm = 1.5, 100.0, 50.0, 1000.0 // T, A/m, A/m, A/m
	v4Source       = "../store/testdata/v4-source/"
)

// OpenV4 copies the real schema-4 file into a temporary folder and opens it
// with this build (migrating it to the latest schema).
func openV4(t *testing.T) *store.Store {
	t.Helper()
	src, err := os.ReadFile("../store/testdata/v4.db")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "hystd.db")
	if err := os.WriteFile(path, src, 0o600); err != nil {
		t.Fatal(err)
	}
	s, err := store.Open(context.Background(), path)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

func runOf(t *testing.T, s *store.Store, specimen string) record.Run {
	t.Helper()
	rs, err := s.Runs(context.Background(), record.RunFilter{Specimen: specimen})
	if err != nil || len(rs) != 1 {
		t.Fatalf("run of %s: %v %v", specimen, rs, err)
	}
	return rs[0]
}

func doubled(t *testing.T, file string) *config.Specimen {
	t.Helper()
	sp, err := config.LoadSpecimen(v4Source + file)
	if err != nil {
		t.Fatal(err)
	}
	sp.Direct.AreaMM2 *= 2
	return &sp
}

var now = time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC)

// TestTwiceTheAreaHalvesB is the acceptance case. B = ψ/(N2·A): with twice
// the cross-section every B halves and H (= N1·I/l_m) is unchanged, so,
// exactly (a factor of 2 is exact in binary floating point, and every step
// of the processing is linear in B: baseline, closure, centring,
// interpolation):
//   - halve: Bmax, Br, mu_a = Bmax/(μ0·Hmax), loss = ∮H dB, (BH)max = max(−B·H),
//     BHmax_B, mu_rec (dB/dH/μ0) and every point's B;
//   - unchanged: Hmax, HcB (B = 0 where B/2 = 0), BHmax_H (the same point) and
//     every point's H and time;
//   - J = B − μ0·H does not halve, so neither do HcJ, Hk and squareness: HcJ
//     is checked against its exact value for the halved loop, the root of
//     Bs/2·tanh((x − Hc)/a) = μ0·x (derived here, as in acq/imports' test).
func TestTwiceTheAreaHalvesB(t *testing.T) {
	ctx := context.Background()
	s := openV4(t)
	halve := map[string]bool{"Bmax": true, "Br": true, "mu_a": true, "loss_j_m3": true, "BHmax": true, "BHmax_B": true, "mu_rec": true}
	same := map[string]bool{"Hmax": true, "HcB": true, "BHmax_H": true}
	jBased := map[string]bool{"HcJ": true, "Hk": true, "squareness": true}
	for _, c := range []struct{ specimen, file string }{{"HX-001", "specimen-direct.yaml"}, {"HX-002", "specimen-magnet.yaml"}} {
		t.Run(c.specimen, func(t *testing.T) {
			run := runOf(t, s, c.specimen)
			before, err := s.LoopOf(ctx, run.ID, 1, 1)
			if err != nil {
				t.Fatal(err)
			}
			res, err := reprocess.Run(ctx, s, reprocess.Options{RunID: run.ID, Specimen: doubled(t, c.file), By: "alba", Now: now})
			if err != nil {
				t.Fatal(err)
			}
			if res.Revision.N != 2 || res.Revision.By != "alba" || res.Revision.Change != "specimen.direct.area_mm2: 50 → 100" {
				t.Fatalf("revision %d by %q, change %q", res.Revision.N, res.Revision.By, res.Revision.Change)
			}
			after, err := s.LoopOf(ctx, run.ID, 1, 2)
			if err != nil {
				t.Fatal(err)
			}
			if len(after.Raw) != len(before.Raw) || len(after.Points) != len(before.Points) || len(after.Points) == 0 {
				t.Fatalf("revision 2: %d raw, %d points; revision 1: %d, %d", len(after.Raw), len(after.Points), len(before.Raw), len(before.Points))
			}
			for i, p := range after.Points {
				q := before.Points[i]
				if p.B != q.B/2 || p.H != q.H || p.T != q.T || p.J != p.B-units.Mu0*p.H {
					t.Fatalf("point %d: B %v H %v J %v; revision 1 B %v H %v", i, p.B, p.H, p.J, q.B, q.H)
				}
			}
			old := map[string]record.Figure{}
			for _, f := range before.Figures {
				old[f.Name] = f
			}
			seen := 0
			for _, f := range after.Figures {
				o, ok := old[f.Name]
				if !ok {
					t.Errorf("%s: not in revision 1", f.Name)
					continue
				}
				seen++
				switch {
				case halve[f.Name]:
					if f.Value != o.Value/2 || !(f.U == o.U/2) {
						t.Errorf("%s = %v ± %v, want exactly half of %v ± %v", f.Name, f.Value, f.U, o.Value, o.U)
					}
				case same[f.Name]:
					if f.Value != o.Value {
						t.Errorf("%s = %v, want unchanged %v", f.Name, f.Value, o.Value)
					}
				case jBased[f.Name]:
				default:
					t.Errorf("%s: not classified by the test", f.Name)
				}
			}
			if seen != len(before.Figures) {
				t.Errorf("%d figures in revision 2, %d in revision 1", seen, len(before.Figures))
			}
			// HcJ of the halved loop, exact: x = Hc + a·atanh(2·μ0·x/Bs).
			x := hc
			for range 50 {
				x = hc + aa*math.Atanh(2*units.Mu0*x/bs)
			}
			for _, f := range after.Figures {
				if f.Name == "HcJ" {
					if rel := math.Abs(f.Value-x) / x; rel > 1e-3 {
						t.Errorf("HcJ = %.7g, exact %.7g for the halved loop (rel. error %.2g > 1e-3)", f.Value, x, rel)
					}
				}
				if f.Name == "Br" {
					if w := bs * math.Tanh(hc/aa) / 2; math.Abs(f.Value-w)/w > 1e-3 {
						t.Errorf("Br = %.7g, exact %.7g for the halved loop", f.Value, w)
					}
				}
			}
			// Revision 1 reads back unchanged; the latest is revision 2.
			again, err := s.LoopOf(ctx, run.ID, 1, 1)
			if err != nil || storetest.SameLoop(again, before) != "" {
				t.Fatalf("revision 1 changed: %v %s", err, storetest.SameLoop(again, before))
			}
			if l, err := s.Loop(ctx, run.ID, 1); err != nil || l.Revision != 2 {
				t.Fatalf("latest loop: revision %d (%v)", l.Revision, err)
			}
			revs, err := s.Revisions(ctx, run.ID)
			if err != nil || len(revs) != 2 || revs[0].Specimen != c.specimen || revs[0].By != "bay 3" ||
				!strings.Contains(revs[1].Config, "area_mm2: 100") || !strings.Contains(revs[0].Config, "area_mm2: 50") {
				t.Fatalf("revisions %+v (%v)", revs, err)
			}
			if !strings.HasPrefix(revs[1].Config, "# imported from tanh-loop.csv (sha256 ") {
				t.Errorf("revision 2 config lost the provenance line: %.80q", revs[1].Config)
			}
			evs, _ := s.Events(ctx, run.ID)
			if last := evs[len(evs)-1].Text; !strings.Contains(strings.Join(eventTexts(evs), "\n"), "revision 2: re-processed from the raw samples by alba; changed specimen.direct.area_mm2: 50 → 100") {
				t.Errorf("no event for the revision; last: %q", last)
			}
		})
	}
}

func eventTexts(evs []record.Event) []string {
	var out []string
	for _, e := range evs {
		out = append(out, e.Text)
	}
	return out
}

// TestRefusals: nothing changed, an unknown run and a run that has not
// ended store nothing.
func TestRefusals(t *testing.T) {
	ctx := context.Background()
	s := openV4(t)
	run := runOf(t, s, "HX-001")
	same, err := config.LoadSpecimen(v4Source + "specimen-direct.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := reprocess.Run(ctx, s, reprocess.Options{RunID: run.ID, Specimen: &same, By: "alba", Now: now}); !errors.Is(err, reprocess.ErrNoChange) {
		t.Fatalf("same specimen: %v", err)
	}
	if _, err := reprocess.Run(ctx, s, reprocess.Options{RunID: "ghost", By: "alba", Now: now}); !errors.Is(err, record.ErrNotFound) {
		t.Fatalf("unknown run: %v", err)
	}
	live := storetest.SampleRun("running", now)
	if err := s.CreateRun(ctx, live); err != nil {
		t.Fatal(err)
	}
	if _, err := reprocess.Run(ctx, s, reprocess.Options{RunID: "running", Specimen: &same, By: "alba", Now: now}); err == nil || !strings.Contains(err.Error(), "only an ended run") {
		t.Fatalf("queued run: %v", err)
	}
	if revs, _ := s.Revisions(ctx, run.ID); len(revs) != 1 {
		t.Fatalf("%d revisions after refusals", len(revs))
	}
}

// liveRun stores, in a memstore, a run as the engine records it (config
// snapshot "# fixture", "# specimen", "# recipe"; loop processed by the
// live processor, fixture.Offline — the one the daemon builds over opened
// instruments, here with the shipped simulated profiles) from raw samples of
// the exact tanh loop with a constant integrator offset, on the import
// tests' fixture (N1 100, N2 50) and the direct specimen (l 100 mm, A 50 mm²).
func liveRun(t *testing.T) (*memstore.Store, record.Run, config.Fixture) {
	t.Helper()
	ctx := context.Background()
	fx, err := config.LoadFixture(v4Source + "fixture-import.yaml")
	if err != nil {
		t.Fatal(err)
	}
	sp, err := config.LoadSpecimen(v4Source + "specimen-direct.yaml")
	if err != nil {
		t.Fatal(err)
	}
	proc, _, err := fixture.Offline(fx, sp, nil)
	if err != nil {
		t.Fatal(err)
	}
	var raw []record.Sample
	k := 0
	row := func(h float64, dir int, ph record.Phase) {
		tt := float64(k) * 0.005
		k++
		b := bs * math.Tanh((h-float64(dir)*hc)/aa)
		raw = append(raw, record.Sample{T: time.Duration(tt * float64(time.Second)), Phase: ph, Setpoint: h * 0.1 / 100,
			I: h * 0.1 / 100, V: math.NaN(), Psi: 3e-4 + 50*50e-6*b + 20e-6*tt, BProbe: math.NaN(), TempC: math.NaN()})
	}
	for range 40 {
		row(0, -1, record.PreHold)
	}
	seg := func(from, to float64, dir int) {
		for j := 1; j <= 200*int(math.Abs(to-from)/hm); j++ {
			row(from+(to-from)*float64(j)/(200*math.Abs(to-from)/hm), dir, record.Sweep)
		}
	}
	seg(0, -hm, -1)
	seg(-hm, hm, 1)
	seg(hm, -hm, -1)
	seg(-hm, 0, 1)
	for range 40 {
		row(0, 1, record.PostHold)
	}
	pr, err := proc(raw, recipe.LoopInfo{Kind: "loop", Amplitude: 1, AmpUnit: "A"})
	if err != nil {
		t.Fatal(err)
	}
	var cfg strings.Builder
	cfg.WriteString("# fixture\n")
	y, _ := yaml.Marshal(fx)
	cfg.Write(y)
	cfg.WriteString("---\n# specimen\n")
	y, _ = yaml.Marshal(sp)
	cfg.Write(y)
	cfg.WriteString("---\n# recipe r.yaml\nkind: recipe\nname: r\n")
	st := memstore.New(func() time.Time { return now })
	run := record.Run{ID: "live-1", Recipe: "r", Fixture: fx.Name, Specimen: sp.ID, Material: sp.Material, Operator: "bay 3",
		Config: cfg.String(), State: record.Queued, Queued: now}
	for _, err := range []error{
		st.CreateRun(ctx, run), st.SetState(ctx, run.ID, record.Running, "", now),
		st.AddLoop(ctx, record.Loop{RunID: run.ID, N: 1, Kind: "loop", Amplitude: 1, AmpUnit: "A", Started: now, Raw: raw,
			Points: pr.Points, Figures: append(pr.Figures, record.Figure{Name: "drive_amplitude", Value: 1, Unit: "A"}), Corrections: pr.Corrections}),
		st.SetState(ctx, run.ID, record.Finished, "", now),
	} {
		if err != nil {
			t.Fatal(err)
		}
	}
	run, _ = st.Run(ctx, run.ID)
	return st, run, fx
}

// TestLiveRunTwiceTheArea: a live run is re-processed through the live
// processor (its profiles' accuracies in the budget, as when it ran): with
// twice the area its B-figures halve exactly, H-figures stay, and what the
// engine found while driving (drive_amplitude) is kept. A fixture with
// twice the search-coil turns N2 does the same (B = ψ/(N2·A)) and is
// recorded as a fixture change.
func TestLiveRunTwiceTheArea(t *testing.T) {
	ctx := context.Background()
	for _, c := range []struct {
		name, change string
		opt          func(fx config.Fixture) reprocess.Options
	}{
		{"area", "specimen.direct.area_mm2: 50 → 100", func(config.Fixture) reprocess.Options {
			return reprocess.Options{Specimen: doubled(t, "specimen-direct.yaml")}
		}},
		{"turns", "fixture.winding.n2: 50 → 100", func(fx config.Fixture) reprocess.Options {
			fx.Winding.N2 *= 2
			return reprocess.Options{Fixture: &fx}
		}},
	} {
		t.Run(c.name, func(t *testing.T) {
			st, run, fx := liveRun(t)
			o := c.opt(fx)
			o.RunID, o.By, o.Now = run.ID, "alba", now
			res, err := reprocess.Run(ctx, st, o)
			if err != nil {
				t.Fatal(err)
			}
			if res.Revision.Change != c.change {
				t.Fatalf("change %q, want %q", res.Revision.Change, c.change)
			}
			l1, _ := st.LoopOf(ctx, run.ID, 1, 1)
			l2, _ := st.LoopOf(ctx, run.ID, 1, 2)
			f1, f2 := map[string]record.Figure{}, map[string]record.Figure{}
			for _, f := range l1.Figures {
				f1[f.Name] = f
			}
			for _, f := range l2.Figures {
				f2[f.Name] = f
			}
			for _, n := range []string{"Bmax", "Br", "mu_a", "loss_j_m3"} {
				if f2[n].Value != f1[n].Value/2 || f1[n].Value == 0 {
					t.Errorf("%s: %v, want half of %v", n, f2[n].Value, f1[n].Value)
				}
			}
			for _, n := range []string{"Hmax", "HcB", "drive_amplitude"} {
				if f2[n].Value != f1[n].Value || f1[n].Unit == "" {
					t.Errorf("%s: %v, want %v unchanged", n, f2[n].Value, f1[n].Value)
				}
			}
			// The budget still holds the profiles' instrument sources.
			if !strings.Contains(f2["Br"].Note, "integrator gain") {
				t.Errorf("Br budget without the integrator's accuracy: %q", f2["Br"].Note)
			}
		})
	}
}
