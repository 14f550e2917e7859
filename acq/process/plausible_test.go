package process

import (
	"strings"
	"testing"

	"hystd/acq/config"
	"hystd/acq/record"
	"hystd/calib/loop"
	"hystd/calib/synth"
)

// TestStrip305m: an Epstein specimen whose strip length was written as 305 m
// instead of 0.305 m. IEC 60404-2 gives A = m/(4·l·ρ), so the area comes out
// a thousand times too small and a loop of 1.5 T (the tanh loop of
// synth.Tanh, measured on the right geometry) reads 1500 T. The geometry
// warns about the strip length, and the processed loop is flagged
// implausible; the right length gives neither.
func TestStrip305m(t *testing.T) {
	fx := config.Fixture{Name: "epstein-bay", Winding: config.Winding{N1: 700, N2: 700}}
	specimen := func(l float64) config.Specimen {
		return config.Specimen{ID: "E-305", Shape: "epstein", MassKg: 1.0, DensityKgM3: 7650,
			Epstein: &config.Epstein{StripLengthM: l, Strips: 28}}
	}
	right, warns, err := SetupFrom(fx, specimen(0.305))
	if err != nil {
		t.Fatal(err)
	}
	if len(warns) != 0 {
		t.Errorf("0.305 m strips: warnings %q", warns)
	}
	sw := synth.Sweep{Hm: 1000, Cycles: 1, PerBranch: 1000, Dt: 1e-3, Start: "tip"}
	tt, h, b := sw.Generate(synth.Tanh{Bs: 1.5, Hc: 50, A: 40, Ai: 60})
	raw := bench{s: right, hold: 200}.raw(tt, h, b, 1e-3)

	wrong, warns, err := SetupFrom(fx, specimen(305))
	if err != nil {
		t.Fatal(err)
	}
	if len(warns) != 1 || !strings.Contains(warns[0], "strip length 305.000 m is outside 0.28–0.32 m") {
		t.Errorf("305 m strips: warnings %q", warns)
	}
	for _, tc := range []struct {
		name  string
		s     Setup
		flags []string
	}{
		{"0.305 m", right, nil},
		{"305 m", wrong, []string{"implausible — check geometry and turns: |J| reaches 1500 T, above the 2.45 T"}},
	} {
		pts, figs, _, err := Loop(raw, tc.s)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		l := record.Loop{Points: pts, Figures: figs}
		got := Implausible(l)
		summary := Implausible(record.Loop{Figures: figs}) // as the API sees a loop without its points
		if tc.flags == nil {
			if len(got) != 0 || len(summary) != 0 {
				t.Errorf("%s: flagged %q / %q", tc.name, got, summary)
			}
			continue
		}
		if len(got) == 0 || len(summary) == 0 {
			t.Fatalf("%s: not flagged (%q / %q); Bmax %v", tc.name, got, summary, figOf(figs, loop.FigBmax))
		}
		if !strings.HasPrefix(got[0], tc.flags[0]) {
			t.Errorf("%s: %q, want it to start %q", tc.name, got[0], tc.flags[0])
		}
	}
}

func figOf(fs []record.Figure, name string) float64 {
	for _, f := range fs {
		if f.Name == name {
			return f.Value
		}
	}
	return 0
}
