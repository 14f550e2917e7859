package calrec

import (
	"math"
	"strings"
	"testing"
	"time"

	"hystd/acq/config"
	"hystd/acq/process"
	"hystd/acq/record"
)

func TestLoadErrors(t *testing.T) {
	for _, c := range []struct{ file, want string }{
		{"bad-due.yaml", "bad-due.yaml:8: due: 2025-01-17 is not after the calibration date 2026-01-17"},
		{"bad-gain.yaml", "bad-gain.yaml:10: integrator.gain.value: must be > 0, got 0"},
		{"bad-key.yaml", "bad-key.yaml:9: coil.area_turns: unknown key"},
		{"bad-mixed.yaml", "bad-mixed.yaml:4: applies_to.fixture: a fixture's record holds a coil block only"},
	} {
		t.Run(c.file, func(t *testing.T) {
			_, err := Load("testdata/" + c.file)
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want one containing %q", err, c.want)
			}
		})
	}
	for _, f := range []string{"integrator-ok.yaml", "integrator-expired.yaml", "probe-ok.yaml"} {
		if _, err := Load("testdata/" + f); err != nil {
			t.Errorf("%s: %v", f, err)
		}
	}
}

func TestPastDue(t *testing.T) {
	r, err := Load("testdata/integrator-expired.yaml") // due 2025-03-11
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		at   time.Time
		want bool
	}{
		{time.Date(2025, 3, 11, 23, 59, 0, 0, time.UTC), false}, // the due day itself is still valid
		{time.Date(2025, 3, 12, 0, 0, 0, 0, time.UTC), true},
	} {
		if got := r.PastDue(c.at); got != c.want {
			t.Errorf("PastDue(%v) = %v, want %v", c.at, got, c.want)
		}
	}
}

// TestApplyFormulas: the records change the samples as their formulas say
// (integrator ψ = (reading − offset)/gain; probe B = (reading − offset) /
// (S·(1 + α·(T − T_ref)))), computed here by hand for one sample.
func TestApplyFormulas(t *testing.T) {
	in, err := Load("testdata/integrator-ok.yaml")
	if err != nil {
		t.Fatal(err)
	}
	pr, err := Load("testdata/probe-ok.yaml")
	if err != nil {
		t.Fatal(err)
	}
	raw := []record.Sample{{Psi: 2.02e-3, BProbe: 0.5, TempC: 33}}
	var s process.Setup
	out, evs, err := Apply(raw, []Record{in, pr}, config.Fixture{Name: "f"}, &s, time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC))
	if err != nil {
		t.Fatal(err)
	}
	if want := 2.02e-3 / 1.01; math.Abs(out[0].Psi-want) > 1e-18 {
		t.Errorf("psi %g, want %g", out[0].Psi, want)
	}
	// (0.5 − 0.001)/(1.02·(1 − 0.001·10)) = 0.499/1.0098
	if want := 0.499 / 1.0098; math.Abs(out[0].BProbe-want) > 1e-15 {
		t.Errorf("B_probe %.12g, want %.12g", out[0].BProbe, want)
	}
	if raw[0].Psi != 2.02e-3 {
		t.Error("raw modified")
	}
	if len(evs) != 2 || evs[0].Level != "info" || len(s.Extra) != 1 {
		t.Errorf("events %v, extra sources %v", evs, s.Extra)
	}
	if _, _, err := Apply(raw, []Record{in, in}, config.Fixture{}, &s, time.Now()); err == nil {
		t.Error("two integrator records accepted")
	}
}

// TestApplyCoil: a coil's area-turns scale ψ by N2·A_c/(N2·A_c)_cal (here
// 50·60 mm² / 3.03e-3 m² = 3e-3/3.03e-3); a record for another fixture, or
// a fixture without a coil area, is refused.
func TestApplyCoil(t *testing.T) {
	r, err := Load("testdata/coil-ok.yaml")
	if err != nil {
		t.Fatal(err)
	}
	fx := config.Fixture{Name: "hollin-ring-1", Winding: config.Winding{N2: 50, CoilAreaMM2: 60}}
	var s process.Setup
	out, _, err := Apply([]record.Sample{{Psi: 1e-3}}, []Record{r}, fx, &s, time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC))
	if err != nil {
		t.Fatal(err)
	}
	if want := 1e-3 * 3e-3 / 3.03e-3; math.Abs(out[0].Psi-want) > 1e-18 {
		t.Errorf("psi %.12g, want %.12g", out[0].Psi, want)
	}
	if len(s.Extra) != 1 || math.Abs(s.Extra[0].BScale-3e-6/3.03e-3) > 1e-15 {
		t.Errorf("budget sources %+v", s.Extra)
	}
	other := fx
	other.Name = "another"
	if _, _, err := Apply(nil, []Record{r}, other, &s, time.Now()); err == nil || !strings.Contains(err.Error(), `applies_to.fixture "hollin-ring-1", but the fixture is "another"`) {
		t.Errorf("other fixture: %v", err)
	}
	fx.Winding.CoilAreaMM2 = 0
	if _, _, err := Apply(nil, []Record{r}, fx, &s, time.Now()); err == nil || !strings.Contains(err.Error(), "winding.coil_area_mm2") {
		t.Errorf("no coil area: %v", err)
	}
}
