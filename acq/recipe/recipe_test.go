package recipe

import (
	"flag"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/config"
	"hystd/acq/config/configtest"
	"hystd/acq/record"
)

var update = flag.Bool("update", false, "rewrite the golden plan listings")

func ringFixture(t *testing.T) (config.Fixture, Geometry) {
	t.Helper()
	fx, sp := configtest.Ring(t)
	g, err := GeometryOf(fx, sp)
	if err != nil {
		t.Fatal(err)
	}
	return fx, g
}

func yokeFixture(t *testing.T) (config.Fixture, Geometry) {
	t.Helper()
	fx, err := config.LoadFixture("testdata/fixture-yoke.yaml")
	if err != nil {
		t.Fatal(err)
	}
	sp, err := config.LoadSpecimen("testdata/specimen-magnet.yaml")
	if err != nil {
		t.Fatal(err)
	}
	g, err := GeometryOf(fx, sp)
	if err != nil {
		t.Fatal(err)
	}
	return fx, g
}

// TestGeometryOf checks H = N1·I/l_m against the worked values of
// REFERENCE §10 items 5 and 7 (IEC 60404-4 mean path, IEC 60205 l_e,
// IEC 60404-2 conventional 0.94 m; values computed from those formulas).
func TestGeometryOf(t *testing.T) {
	ring := func(path string) config.Specimen {
		return config.Specimen{ID: "r", Shape: "ring", Ring: &config.Ring{OuterMM: 50, InnerMM: 40, HeightMM: 10, Path: path}}
	}
	tests := []struct {
		name string
		n1   int
		sp   config.Specimen
		i, h float64 // A → A/m
		tol  float64
	}{
		{"ring mean path, IEC 60404-4", 100, ring("mean"), 2, 1414.71, 0.01},
		{"ring effective path, IEC 60205", 100, ring("effective"), 2, 1426.48, 0.01},
		{"Epstein 0.94 m, IEC 60404-2", 700, config.Specimen{ID: "e", Shape: "epstein", MassKg: 1, DensityKgM3: 7650,
			Epstein: &config.Epstein{StripLengthM: 0.3, Strips: 20}}, 1, 744.68, 0.01},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			g, err := GeometryOf(config.Fixture{Winding: config.Winding{N1: tc.n1, N2: 100}}, tc.sp)
			if err != nil {
				t.Fatal(err)
			}
			if h := tc.i / g.AmperePerAm(); math.Abs(h-tc.h) > tc.tol {
				t.Errorf("H = %.3f A/m, want %.2f ± %.2f", h, tc.h, tc.tol)
			}
		})
	}
}

// TestPlanListing expands every sample recipe in configs/recipes and compares
// the listing of its steps with a golden file (regenerate with -update and
// read the diff). The step programs are checked by the invariants below as
// well, so a golden file cannot bless a wrong program silently.
func TestPlanListing(t *testing.T) {
	files, err := filepath.Glob("../../configs/recipes/*.yaml")
	if err != nil || len(files) == 0 {
		t.Fatalf("no sample recipes: %v", err)
	}
	for _, f := range files {
		name := strings.TrimSuffix(filepath.Base(f), ".yaml")
		t.Run(name, func(t *testing.T) {
			r, err := Load(f)
			if err != nil {
				t.Fatal(err)
			}
			fx, g := ringFixture(t)
			if r.Control == ControlField {
				fx, g = yokeFixture(t)
			}
			steps, err := Expand(r, fx, g)
			if err != nil {
				t.Fatal(err)
			}
			var b strings.Builder
			for _, s := range steps {
				b.WriteString(s.String())
				b.WriteByte('\n')
			}
			checkInvariants(t, steps)
			golden := filepath.Join("testdata", name+".plan")
			if *update {
				if err := os.WriteFile(golden, []byte(b.String()), 0o644); err != nil {
					t.Fatal(err)
				}
			}
			want, err := os.ReadFile(golden)
			if err != nil {
				t.Fatalf("%v (run with -update to create it)", err)
			}
			if b.String() != string(want) {
				t.Errorf("plan differs from %s:\n got:\n%s\nwant:\n%s", golden, b.String(), want)
			}
		})
	}
}

// checkInvariants: levels are continuous from step to step, the plan starts
// and ends at zero, every Record step has pre hold, sweep and post hold in
// that order with static holds.
func checkInvariants(t *testing.T, steps []Step) {
	t.Helper()
	level := 0.0
	for _, s := range steps {
		if s.From != level {
			t.Errorf("step %d starts at %g, previous ended at %g", s.N, s.From, level)
		}
		if s.Loop != nil {
			var phases []record.Phase
			prev := s.From
			for _, g := range s.Segments {
				if g.Phase != "" && (len(phases) == 0 || phases[len(phases)-1] != g.Phase) {
					phases = append(phases, g.Phase)
				}
				if (g.Phase == record.PreHold || g.Phase == record.PostHold) && g.To != prev {
					t.Errorf("step %d: %s hold moves from %g to %g", s.N, g.Phase, prev, g.To)
				}
				prev = g.To
			}
			if want := []record.Phase{record.PreHold, record.Sweep, record.PostHold}; !equalPhases(phases, want) {
				t.Errorf("step %d phases %v, want %v", s.N, phases, want)
			}
			checkTipsOnGrid(t, s)
		}
		level = s.End()
	}
	if level != 0 {
		t.Errorf("plan ends at %g, want 0", level)
	}
}

// checkTipsOnGrid: the engine samples a step every Period from its start,
// so the sweep's start, its reversals and its end must fall on whole
// periods, and At must put the samples there (the tips) in the sweep.
func checkTipsOnGrid(t *testing.T, s Step) {
	t.Helper()
	var at time.Duration
	for i, g := range s.Segments {
		at += g.Dur
		next := record.Phase("")
		if i+1 < len(s.Segments) {
			next = s.Segments[i+1].Phase
		}
		if g.Phase != record.Sweep && next != record.Sweep {
			continue
		}
		if at%s.Period != 0 {
			t.Errorf("step %d: a tip of the sweep at %s is not on the %s sample grid", s.N, at, s.Period)
		}
		if lv, ph, _ := s.At(at); ph != record.Sweep || lv != s.Segments[i].To {
			t.Errorf("step %d: the sample at the tip %s is %g %q, want %g in the sweep", s.N, at, lv, ph, s.Segments[i].To)
		}
	}
}

func equalPhases(a, b []record.Phase) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// TestLoopProgram checks one recorded loop in detail: ±1 kA/m on the ring
// bench (N1 = 200, mean path π·45 mm) is ±0.70686 A; at 400 A/m/s a sweep of
// 4 kA/m takes 10 s; 500 points per sweep give a 20 ms period.
func TestLoopProgram(t *testing.T) {
	src := `kind: recipe
name: one-loop
steps:
  - record_loop: {amplitude: 1 kA/m, rate: 400 A/m/s, points: 500, hold: 2s}
`
	r, err := Parse("one-loop.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	fx, g := ringFixture(t)
	steps, err := Expand(r, fx, g)
	if err != nil {
		t.Fatal(err)
	}
	if len(steps) != 2 || steps[0].Kind != KindRecord || steps[1].Kind != KindReturn {
		t.Fatalf("steps: %v", steps)
	}
	s := steps[0]
	a := 1000 * math.Pi * 0.045 / 200
	if math.Abs(s.PeakCurrent-a) > 1e-9 {
		t.Errorf("peak current %g A, want %g", s.PeakCurrent, a)
	}
	if s.Period != 20*time.Millisecond {
		t.Errorf("period %s, want 20ms", s.Period)
	}
	// approach 0 → +A at 400 A/m/s takes 2.5 s; pre hold 2 s; then the sweep.
	lv, ph, _ := s.At(2500*time.Millisecond + time.Second)
	if math.Abs(lv-a) > 1e-12 || ph != record.PreHold {
		t.Errorf("at 3.5 s: %g %q, want %g pre", lv, ph, a)
	}
	lv, ph, _ = s.At(4500*time.Millisecond + 5*time.Second) // −A at the middle of the sweep
	if math.Abs(lv+a) > 1e-12 || ph != record.Sweep {
		t.Errorf("mid sweep: %g %q, want %g sweep", lv, ph, -a)
	}
	if d := s.Duration(); d != 2500*time.Millisecond+2*time.Second+10*time.Second+2*time.Second {
		t.Errorf("duration %s", d)
	}
	if _, _, done := s.At(s.Duration()); !done {
		t.Error("not done at the end")
	}
}

// TestAimedLoop: a loop aimed at a peak is checked against the fixture at
// its largest amplitude (the fixture's 10 A), and rebuilt at any amplitude
// from any level with the same rate, holds, points and tips on the grid.
func TestAimedLoop(t *testing.T) {
	src := `kind: recipe
name: aimed
steps:
  - record_loop: {amplitude: 1 kA/m, rate: 400 A/m/s, points: 500, hold: 2s, peak: {j: 1.5 T}}
`
	r, err := Parse("aimed.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	fx, g := ringFixture(t)
	steps, err := Expand(r, fx, g)
	if err != nil {
		t.Fatal(err)
	}
	s := steps[0]
	k := s.Aim
	a := 1000 * math.Pi * 0.045 / 200
	if k == nil || k.Of != "J" || k.Target != 1.5 || math.Abs(k.Tolerance-0.015) > 1e-15 || k.Tries != 8 || k.Max != 10 || math.Abs(k.First-a) > 1e-12 {
		t.Fatalf("aim %+v", k)
	}
	if s.PeakCurrent != 10 {
		t.Errorf("peak current %g A, want the fixture's 10 A", s.PeakCurrent)
	}
	checkTipsOnGrid(t, s)
	b := s.AtAmplitude(2*a, a)
	if b.From != a || b.End() != 2*a || math.Abs(b.Loop.Amplitude-2000) > 1e-9 {
		t.Errorf("rebuilt from %g to %g, loop amplitude %g", b.From, b.End(), b.Loop.Amplitude)
	}
	// 500 points over a sweep of 8 kA/m at 400 A/m/s (20 s): 40 ms.
	if b.Period != 40*time.Millisecond {
		t.Errorf("period %s, want 40ms", b.Period)
	}
	checkTipsOnGrid(t, b)
	c := s.ConditionAt(a, 2*a, 2)
	if c.From != 2*a || c.End() != a || len(c.Segments) != 5 || c.Loop != nil {
		t.Errorf("conditioning %v", c)
	}
}

// TestRefusal: recipes that would cross a fixture limit are refused with
// FILE:LINE: key: problem naming the step and the limit.
func TestRefusal(t *testing.T) {
	tests := []struct {
		name, steps string
		want        []string
	}{
		{"current", "  - record_loop: {amplitude: 15 kA/m, rate: 1 kA/m/s, points: 100}\n",
			[]string{"too-much.yaml:4: steps.0.record_loop.amplitude:", "step 1 (steps.0.record_loop)", "10.6 A", "limits.max_current_a = 10 A"}},
		{"slew", "  - condition: {amplitude: 1 kA/m, rate: 100 kA/m/s}\n",
			[]string{"too-much.yaml:4: steps.0.condition.amplitude:", "70.69 A/s", "limits.max_slew_a_per_s = 50 A/s"}},
		{"compliance voltage", "  - condition: {amplitude: 9 A, rate: 45 A/s}\n",
			[]string{"steps.0.condition.amplitude", "9.45 V", "limits.max_voltage_v = 30 V"}},
		{"peak search's first try", "  - record_loop: {amplitude: 15 kA/m, rate: 1 kA/m/s, points: 100, peak: {b: 1.5 T}}\n",
			[]string{"too-much.yaml:4: steps.0.record_loop.amplitude:", "first try 15 kA/m", "limits.max_current_a = 10 A"}},
		{"peak search at the current limit", "  - record_loop: {amplitude: 100 A/m, rate: 40 kA/m/s, points: 100, peak: {b: 1.5 T}}\n",
			[]string{"too-much.yaml:4: steps.0.record_loop.peak:", "step 1 (steps.0.record_loop) needs about", "limits.max_voltage_v = 30 V"}},
		{"normal curve top amplitude", "  - normal_curve: {from: 1 kA/m, to: 20 kA/m, count: 3, rate: 1 kA/m/s, points: 100}\n",
			[]string{"too-much.yaml:4: steps.0.normal_curve.to:", "limits.max_current_a"}},
	}
	fx, g := ringFixture(t)
	fx.Limits.MaxVoltageV = 30
	fx.Winding.ResistanceOhm, fx.Winding.InductanceH = 0.8, 0.05 // 0.8·9 + 0.05·45 = 9.45 V
	fx.Limits.MaxVoltageV = 9
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r, err := Parse("too-much.yaml", []byte("kind: recipe\nname: too-much\nsteps:\n"+tc.steps))
			if err != nil {
				t.Fatal(err)
			}
			_, err = Expand(r, fx, g)
			if err == nil {
				t.Fatal("accepted")
			}
			msg := strings.ReplaceAll(err.Error(), "max_voltage_v = 9 V", "max_voltage_v = 30 V")
			for _, w := range tc.want {
				if !strings.Contains(msg, w) {
					t.Errorf("error %q lacks %q", err, w)
				}
			}
		})
	}
}

// TestParseErrors: bad recipes are refused with the file, line, key and problem.
func TestParseErrors(t *testing.T) {
	tests := []struct{ name, src, want string }{
		{"bare number", "kind: recipe\nname: x\nsteps:\n  - condition:\n      amplitude: 5\n      rate: 1 A/s\n",
			"x.yaml:5: steps.0.condition.amplitude: 5 has no unit"},
		{"unknown kind", "kind: recipe\nname: x\nsteps:\n  - spin: {}\n", "x.yaml:4: steps.0.spin: unknown key"},
		{"two kinds", "kind: recipe\nname: x\nsteps:\n  - wait: {duration: 1s}\n    condition: {amplitude: 1 A, rate: 1 A/s}\n",
			"x.yaml:4: steps.0: one kind per step"},
		{"mixed units", "kind: recipe\nname: x\nsteps:\n  - condition: {amplitude: 1 A, rate: 1 A/s}\n  - record_loop: {amplitude: 1 kA/m, rate: 1 kA/m/s, points: 100}\n",
			"x.yaml:5: steps.1.record_loop.amplitude: unit A/m differs from A"},
		{"demagnetize too low", "kind: recipe\nname: x\nsteps:\n  - demagnetize: {from: 1 kA/m, rate: 1 kA/m/s}\n  - record_loop: {amplitude: 1 kA/m, rate: 1 kA/m/s, points: 100}\n",
			"x.yaml:4: steps.0.demagnetize.from: 1 kA/m does not start above the highest test level, 1 kA/m at steps.1.record_loop.amplitude"},
		{"field control in A", "kind: recipe\nname: x\ncontrol: field\nsteps:\n  - condition: {amplitude: 1 A, rate: 1 A/s}\n",
			"x.yaml:5: steps.0.condition.amplitude: control: field sets H"},
		{"no sampling", "kind: recipe\nname: x\nsteps:\n  - record_loop: {amplitude: 1 A, rate: 1 A/s}\n",
			"x.yaml:4: steps.0.record_loop: required: points"},
		{"bad unit", "kind: recipe\nname: x\nsteps:\n  - condition:\n      amplitude: 1 Oe\n      rate: 1 A/s\n",
			"steps.0.condition.amplitude: unit \"Oe\""},
		{"duration without unit", "kind: recipe\nname: x\nsteps:\n  - wait: {duration: 5}\n",
			"x.yaml:4: steps.0.wait.duration: duration \"5\" has no unit"},
		{"positive demag curve end", "kind: recipe\nname: x\ncontrol: field\nfield_gain_a_per_a_m: 1e-5\nsteps:\n  - demag_curve: {saturate: 1 MA/m, to: 100 kA/m, rate: 10 kA/m/s, points: 100}\n",
			"x.yaml:6: steps.0.demag_curve.to: must be negative"},
		{"integrator range", "kind: recipe\nname: x\nintegrator_range_wb: -1\nsteps:\n  - wait: {duration: 1s}\n",
			"x.yaml:3: integrator_range_wb: must be a full scale in Wb-turns above 0"},
		{"wrong kind", "kind: fixture\nname: x\nsteps:\n  - wait: {duration: 1s}\n", "x.yaml:1: kind: must be \"recipe\""},
		{"b_at in A", "kind: recipe\nname: x\nsteps:\n  - normal_curve:\n      from: 100 A/m\n      to: 10 kA/m\n      count: 5\n      rate: 1 kA/m/s\n      points: 100\n      b_at: [800 A/m, 2 A]\n",
			"x.yaml:10: steps.0.normal_curve.b_at.1: B is read at a field strength: write it in A/m, got 2 A"},
		{"b_at beyond the amplitudes", "kind: recipe\nname: x\nsteps:\n  - normal_curve:\n      amplitudes: [100 A/m, 1 kA/m, 2.5 kA/m]\n      rate: 1 kA/m/s\n      points: 100\n      b_at: [800 A/m, 2500 A/m, 5000 A/m]\n",
			"x.yaml:8: steps.0.normal_curve.b_at.2: 5 kA/m is outside the amplitudes of the normal curve (100 A/m to 2.5 kA/m)"},
		{"peak without a unit", "kind: recipe\nname: x\nsteps:\n  - record_loop:\n      amplitude: 1 A\n      rate: 1 A/s\n      points: 100\n      peak: {b: 1.5}\n",
			"x.yaml:8: steps.0.record_loop.peak.b: 1.5 has no unit; write it in T"},
		{"peak in A/m", "kind: recipe\nname: x\nsteps:\n  - record_loop:\n      amplitude: 1 A\n      rate: 1 A/s\n      points: 100\n      peak: {b: 1.5 kA/m}\n",
			"x.yaml:8: steps.0.record_loop.peak.b: unit \"kA/m\" of \"1.5 kA/m\" is not T or mT"},
		{"peak B and J", "kind: recipe\nname: x\nsteps:\n  - record_loop:\n      amplitude: 1 A\n      rate: 1 A/s\n      points: 100\n      peak: {b: 1.5 T, j: 1.5 T}\n",
			"x.yaml:8: steps.0.record_loop.peak: give b or j"},
		{"peak neither", "kind: recipe\nname: x\nsteps:\n  - record_loop:\n      amplitude: 1 A\n      rate: 1 A/s\n      points: 100\n      peak: {tries: 3}\n",
			"x.yaml:8: steps.0.record_loop.peak: required: b or j"},
		{"peak beyond saturation", "kind: recipe\nname: x\nsteps:\n  - record_loop:\n      amplitude: 1 A\n      rate: 1 A/s\n      points: 100\n      peak:\n        b: 7 T\n",
			"x.yaml:9: steps.0.record_loop.peak.b: must be above 0 T and at most 5 T, got 7 T"},
		{"peak tolerance too wide", "kind: recipe\nname: x\nsteps:\n  - record_loop:\n      amplitude: 1 A\n      rate: 1 A/s\n      points: 100\n      peak:\n        b: 1 T\n        tolerance: 200 mT\n",
			"x.yaml:10: steps.0.record_loop.peak.tolerance: must be above 0 T and at most a tenth of the target (100 mT), got 200 mT"},
		{"peak tries", "kind: recipe\nname: x\nsteps:\n  - record_loop:\n      amplitude: 1 A\n      rate: 1 A/s\n      points: 100\n      peak:\n        j: 1 T\n        tries: 50\n",
			"x.yaml:10: steps.0.record_loop.peak.tries: must be 1–20, got 50"},
		{"b_at not increasing", "kind: recipe\nname: x\nsteps:\n  - normal_curve:\n      from: 100 A/m\n      to: 10 kA/m\n      count: 5\n      rate: 1 kA/m/s\n      points: 100\n      b_at: [2500 A/m, 800 A/m]\n",
			"x.yaml:10: steps.0.normal_curve.b_at.1: fields must increase"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Parse("x.yaml", []byte(tc.src))
			if err == nil {
				t.Fatal("accepted")
			}
			if !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error:\n%v\nwant it to contain:\n%s", err, tc.want)
			}
		})
	}
}

// TestFieldControlOnYoke: a closed-loop recipe on a yoke has no current known
// in advance; a ring-unit recipe in A/m with control: current is refused there.
func TestFieldControlOnYoke(t *testing.T) {
	fx, g := yokeFixture(t)
	r, err := Parse("y.yaml", []byte("kind: recipe\nname: y\nsteps:\n  - condition: {amplitude: 1 kA/m, rate: 1 kA/m/s}\n"))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := Expand(r, fx, g); err == nil || !strings.Contains(err.Error(), "y.yaml:1: control: levels in A/m with control: current need a fixture with h_from: current") {
		t.Errorf("A/m open loop on a yoke: %v", err)
	}
	r, err = Parse("y.yaml", []byte("kind: recipe\nname: y\ncontrol: field\nsteps:\n  - condition: {amplitude: 2.1 MA/m, rate: 1 kA/m/s}\n"))
	if err != nil {
		t.Fatal(err)
	}
	_, err = Expand(r, fx, g)
	if err == nil || !strings.Contains(err.Error(), "field_gain_a_per_a_m: required") || !strings.Contains(err.Error(), "") {
		t.Errorf("no gain: %v", err)
	}
	r, err = Parse("y.yaml", []byte("kind: recipe\nname: y\ncontrol: field\nfield_gain_a_per_a_m: 1e-5\nsteps:\n  - condition: {amplitude: 2.1 MA/m, rate: 1 kA/m/s}\n"))
	if err != nil {
		t.Fatal(err)
	}
	// μ0 · 2.1 MA/m = 2.639 T > 2.5 T (CODATA 2018 μ0).
	if _, err = Expand(r, fx, g); err == nil || !strings.Contains(err.Error(), "2.639 T, above the fixture limit limits.max_field_t = 2.5 T") {
		t.Errorf("field limit: %v", err)
	}
}

// TestNormalCurveFamily: every loop of a normal_curve step carries the step
// key, its place in the family and the b_at fields in A/m, also when the
// recipe commands currents.
func TestNormalCurveFamily(t *testing.T) {
	src := "kind: recipe\nname: x\nsteps:\n  - normal_curve:\n      amplitudes: [0.5 A, 1 A, 2 A]\n      rate: 1 A/s\n      points: 100\n      b_at: [800 A/m]\n"
	r, err := Parse("x.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	var got []LoopInfo
	fx, g := ringFixture(t)
	steps, err := Expand(r, fx, g)
	if err != nil {
		t.Fatal(err)
	}
	for _, st := range steps {
		if st.Loop != nil {
			got = append(got, *st.Loop)
		}
	}
	if len(got) != 3 {
		t.Fatalf("%d loops", len(got))
	}
	for i, li := range got {
		if li.Kind != LoopKindNormal || li.Family != "steps.0.normal_curve" || li.Member != i+1 || li.Of != 3 ||
			len(li.BAt) != 1 || li.BAt[0] != 800 {
			t.Errorf("loop %d: %+v", i+1, li)
		}
	}
}
