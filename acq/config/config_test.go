package config

import (
	"fmt"
	"io/fs"
	"strings"
	"testing"

	"hystd/configs"
)

func sample(t *testing.T, name string) []byte {
	t.Helper()
	b, err := fs.ReadFile(configs.Samples, name)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func TestSampleFixtureAndSpecimenLoad(t *testing.T) {
	f, err := ParseFixture("fixture-ring-bench.yaml", sample(t, "fixture-ring-bench.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if f.Winding.N1 != 200 || f.Limits.CommTimeout.D().Seconds() != 2 {
		t.Errorf("decoded %+v", f)
	}
	sp, err := ParseSpecimen("specimen-ring-r17.yaml", sample(t, "specimen-ring-r17.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if l, m, d := sp.Tolerances.Tol(); l != 0.02 || m != 0.01 || d != 0.5 || sp.MuInitialB() != 4e-3 {
		t.Errorf("tolerances %v mm, %v g, %v %%, μ_initial at %v T", l, m, d, sp.MuInitialB())
	}
}

// TestBadFixture edits the sample fixture one line at a time and checks that
// the error names the file, the line and the key.
func TestBadFixture(t *testing.T) {
	good := string(sample(t, "fixture-ring-bench.yaml"))
	cases := []struct {
		name, from, to string
		want           string // substring of the error
	}{
		{"misspelled key", "  n2: 100", "  n_2: 100", "f.yaml:%d: winding.n_2: unknown key (did you mean \"n2\"?)"},
		{"negative turns", "  n1: 200", "  n1: -3", "f.yaml:%d: winding.n1: must be a positive number of turns, got -3"},
		{"duration without unit", "  comm_timeout: 2s", "  comm_timeout: 2", "f.yaml:%d: limits.comm_timeout: duration \"2\" has no unit"},
		{"text for a number", "  max_voltage_v: 30", "  max_voltage_v: thirty", "f.yaml:%d: limits.max_voltage_v: cannot unmarshal text `thirty` into float64"},
		{"unknown h source", "h_from: current", "h_from: currant", "f.yaml:%d: h_from: \"currant\" is not one of [current field_meter]"},
		{"zero current limit", "  max_current_a: 10", "  max_current_a: 0", "f.yaml:%d: limits.max_current_a: must be a positive number, got 0"},
		{"no port", "  integrator:  {port: /dev/ttyUSB1, profile: sim-integrator}", "  integrator:  {profile: sim-integrator}", "f.yaml:%d: instruments.integrator: needs a port"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			bad := strings.Replace(good, tc.from, tc.to, 1)
			if bad == good {
				t.Fatalf("test edit %q not applied", tc.from)
			}
			_, err := ParseFixture("f.yaml", []byte(bad))
			if err == nil {
				t.Fatal("accepted")
			}
			want := fmt.Sprintf(tc.want, lineOf(bad, tc.to))
			if !strings.Contains(err.Error(), want) {
				t.Errorf("error\n%v\nwant it to contain\n%s", err, want)
			}
		})
	}
}

func TestBadSpecimen(t *testing.T) {
	good := string(sample(t, "specimen-ring-r17.yaml"))
	cases := []struct{ name, from, to, want string }{
		{"negative dimension", "  height_mm: 10", "  height_mm: -10", "s.yaml:%d: ring.height_mm: must be a positive number, got -10"},
		{"inner above outer", "  inner_diameter_mm: 40", "  inner_diameter_mm: 55", "s.yaml:%d: ring.inner_diameter_mm: must be smaller than outer_diameter_mm"},
		{"shape without block", "shape: ring", "shape: epstein", "s.yaml:%d: shape: needs an epstein block"},
		{"unknown path", "  path: mean", "  path: average", "s.yaml:%d: ring.path: \"average\" is not one of [mean effective]"},
		{"negative length tolerance", "  length_mm: 0.02", "  length_mm: -0.02", "s.yaml:%d: tolerances.length_mm: must be from 0 (exact) to 10 mm, got -0.02"},
		{"mass tolerance in kg", "  mass_g: 0.01", "  mass_g: 500", "s.yaml:%d: tolerances.mass_g: must be from 0 (exact) to 100 g, got 500"},
		{"density tolerance NaN", "  density_pct: 0.5", "  density_pct: .nan", "s.yaml:%d: tolerances.density_pct: must be from 0 (exact) to 20 %%, got NaN"},
		{"misspelled tolerance", "  mass_g: 0.01", "  mas_g: 0.01", `s.yaml:%d: tolerances.mas_g: unknown key (did you mean "mass_g"?)`},
		{"μ_initial level in T", "mu_initial_b_mt: 4", "mu_initial_b_mt: 400", "s.yaml:%d: mu_initial_b_mt: must be a low flux density in mT, above 0 and at most 100"},
		{"negative μ_initial level", "mu_initial_b_mt: 4", "mu_initial_b_mt: -4", "s.yaml:%d: mu_initial_b_mt: must be a low flux density in mT"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			bad := strings.Replace(good, tc.from, tc.to, 1)
			if bad == good {
				t.Fatalf("test edit %q not applied", tc.from)
			}
			_, err := ParseSpecimen("s.yaml", []byte(bad))
			want := fmt.Sprintf(tc.want, lineOf(bad, tc.to))
			if err == nil || !strings.Contains(err.Error(), want) {
				t.Errorf("error\n%v\nwant it to contain\n%s", err, want)
			}
		})
	}
}

// lineOf returns the 1-based line on which sub starts in text.
func lineOf(text, sub string) int {
	i := strings.Index(text, sub)
	if i < 0 {
		return 0
	}
	return strings.Count(text[:i], "\n") + 1
}
