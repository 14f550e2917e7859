package grade

import (
	"math"
	"strings"
	"testing"

	"hystd/acq/record"
	"hystd/configs"
)

var nan = math.NaN()

// TestDecideEdges checks the decision rules at their edges. The rule is
// guarded acceptance as described in ILAC-G8:09/2019 §4.2.3 and ISO
// 14253-1:2017 (content from memory): pass when value ± U lies inside the
// limits, fail when it lies wholly outside, undecided in between. Values are
// binary-exact so that the equality edges are tested exactly.
func TestDecideEdges(t *testing.T) {
	cases := []struct {
		name         string
		rule         string
		v, u, lo, hi float64
		want         record.Outcome
	}{
		// upper limit 0.75, U = 0.25
		{"inside, well", RuleGuarded, 0.25, 0.25, nan, 0.75, record.Pass},
		{"inside, v+U touches the limit", RuleGuarded, 0.5, 0.25, nan, 0.75, record.Pass},
		{"straddles, v below", RuleGuarded, 0.625, 0.25, nan, 0.75, record.Undecided},
		{"straddles, v on the limit", RuleGuarded, 0.75, 0.25, nan, 0.75, record.Undecided},
		{"straddles, v above", RuleGuarded, 0.875, 0.25, nan, 0.75, record.Undecided},
		{"outside, v−U touches the limit", RuleGuarded, 1.0, 0.25, nan, 0.75, record.Undecided},
		{"outside, wholly", RuleGuarded, 1.125, 0.25, nan, 0.75, record.Fail},
		// lower limit 1.25 (e.g. Br ≥ 1.25 T), U = 0.03125
		{"lower: inside, v−U on the limit", RuleGuarded, 1.28125, 0.03125, 1.25, nan, record.Pass},
		{"lower: straddles", RuleGuarded, 1.25, 0.03125, 1.25, nan, record.Undecided},
		{"lower: v+U touches from below", RuleGuarded, 1.21875, 0.03125, 1.25, nan, record.Undecided},
		{"lower: outside", RuleGuarded, 1.1875, 0.03125, 1.25, nan, record.Fail},
		// both limits
		{"band: inside", RuleGuarded, 1.5, 0.25, 1, 2, record.Pass},
		{"band: U wider than the band", RuleGuarded, 1.5, 1, 1, 2, record.Undecided},
		{"band: fails high", RuleGuarded, 2.5, 0.25, 1, 2, record.Fail},
		// the examples of a trend judged on the value alone: 9.02 ± 4.73 under 10 is not a pass,
		// 12.586 ± 0.49 over 10 is a fail.
		{"trend example 1", RuleGuarded, 9.02, 4.73, nan, 10, record.Undecided},
		{"trend example 2", RuleGuarded, 12.586, 0.49, nan, 10, record.Fail},
		// no U: guarded cannot decide, simple compares the value alone
		{"guarded without U", RuleGuarded, 0.25, nan, nan, 0.75, record.Undecided},
		{"simple without U", RuleSimple, 0.25, nan, nan, 0.75, record.Pass},
		{"simple: on the limit passes", RuleSimple, 0.75, 0.25, nan, 0.75, record.Pass},
		{"simple: just above fails", RuleSimple, 0.875, 0.25, nan, 0.75, record.Fail},
		{"simple: example 1 passes", RuleSimple, 9.02, 4.73, nan, 10, record.Pass},
		{"no value", RuleSimple, nan, 0.1, nan, 0.75, record.Undecided},
	}
	for _, tc := range cases {
		got, _ := Decide(tc.rule, tc.v, tc.u, tc.lo, tc.hi)
		if got != tc.want {
			t.Errorf("%s: %s %g ± %g in [%g, %g] = %s, want %s", tc.name, tc.rule, tc.v, tc.u, tc.lo, tc.hi, got, tc.want)
		}
	}
}

const sampleGrade = `kind: grade
name: TEST-1
limits:
  - figure: HcB
    max: 60
    when: {loop_kind: loop, h_amplitude_a_m: 1000, tolerance: 0.05}
  - figure: Bmax
    min: 1.45
    unit: T
    when: {h_amplitude_a_m: 1000}
  - figure: Br
    min: 1.25
    when: {loop_kind: loop, temp_min_c: 18, temp_max_c: 28}
`

func fig(name string, v, u float64, unit string) record.Figure {
	return record.Figure{Name: name, Value: v, U: u, Unit: unit}
}

// TestJudgeConditions: a limit applies only to loops meeting its
// conditions; the amplitude is the measured Hmax within the tolerance;
// a temperature condition without readings is undecided.
func TestJudgeConditions(t *testing.T) {
	g, err := Parse("g.yaml", []byte(sampleGrade))
	if err != nil {
		t.Fatal(err)
	}
	if g.Rule != RuleGuarded {
		t.Fatalf("default rule %q", g.Rule)
	}
	raw := []record.Sample{{Phase: record.Sweep, TempC: 22}, {Phase: record.Sweep, TempC: 24}, {Phase: record.PreHold, TempC: 90}}
	l := record.Loop{Kind: "loop", Amplitude: 1000, AmpUnit: "A/m", Raw: raw, Figures: []record.Figure{
		fig("Hmax", 1040, 5, "A/m"), fig("Bmax", 1.5, 0.01, "T"), fig("Br", 1.2, 0.1, "T"), fig("HcB", 50, 2, "A/m"),
	}}
	vs := g.Judge(l, "")
	got := map[string]record.Verdict{}
	for _, v := range vs {
		got[v.Figure] = v
	}
	if len(vs) != 3 || got["HcB"].Outcome != record.Pass || got["Bmax"].Outcome != record.Pass || got["Br"].Outcome != record.Undecided {
		t.Fatalf("verdicts %+v", vs)
	}
	if !strings.Contains(got["Br"].Note, "23.0 °C") || got["Br"].Rule != RuleGuarded || got["HcB"].Grade != "TEST-1" {
		t.Errorf("notes %+v", got)
	}
	if record.Worst(vs) != record.Undecided {
		t.Errorf("worst %s", record.Worst(vs))
	}
	// 6 % off the amplitude: only the Br limit (no amplitude condition) applies.
	l.Figures[0].Value = 1060
	if vs := g.Judge(l, ""); len(vs) != 1 || vs[0].Figure != "Br" {
		t.Errorf("off-amplitude verdicts %+v", vs)
	}
	// No temperature readings: the Br limit is undecided, with the reason.
	l.Raw = nil
	vs = g.Judge(l, RuleSimple)
	if len(vs) != 1 || vs[0].Outcome != record.Undecided || !strings.Contains(vs[0].Note, "temperature not measured") || vs[0].Rule != RuleSimple {
		t.Errorf("without temperature %+v", vs)
	}
	// Out of the temperature range: no verdict.
	l.Raw = []record.Sample{{Phase: record.Sweep, TempC: 40}}
	if vs := g.Judge(l, ""); len(vs) != 0 {
		t.Errorf("out of range %+v", vs)
	}
	// A normal-curve loop does not match loop_kind: loop.
	l.Kind = "normal-curve"
	if vs := g.Judge(l, ""); len(vs) != 0 {
		t.Errorf("other kind %+v", vs)
	}
}

func TestBadGradeFiles(t *testing.T) {
	cases := []struct{ doc, want string }{
		{"kind: grade\nname: x\nlimits:\n  - figure: Hc\n    max: 1\n", "g.yaml:4: limits.0.figure: unknown figure \"Hc\""},
		{"kind: grade\nname: x\nlimits:\n  - figure: HcB\n", "g.yaml:4: limits.0: needs min, max or both"},
		{"kind: grade\nname: x\nlimits:\n  - figure: HcB\n    max: 1\n    unit: kA/m\n", "limits.0.unit: HcB is stored in \"A/m\""},
		{"kind: grade\nname: x\ndecision_rule: lenient\nlimits:\n  - {figure: HcB, max: 1}\n", "decision_rule: \"lenient\" is not one of"},
		{"kind: grade\nname: x\nlimits:\n  - {figure: Br, min: 2, max: 1}\n", "min 2 is above max 1"},
		{"kind: grade\nname: x\nlimits:\n  - {figure: Br, min: 1, when: {tolerance: 1.5}}\n", "when.tolerance"},
		{"kind: grade\nname: x\nlimits:\n  - {figure: Br, min: 1, when: {amplitude: 3}}\n", "when.amplitude: unknown key"},
		{"kind: grade\nlimits:\n  - {figure: Br, min: 1}\n", "name: required"},
		{"kind: grade\nname: x\nlimits:\n  - {figure: b_at_800_a_m, min: 1.5, unit: A/m}\n", "limits.0.unit: b_at_800_a_m is stored in \"T\""},
		{"kind: grade\nname: x\nlimits:\n  - {figure: b_at_800, min: 1.5}\n", "unknown figure \"b_at_800\""},
	}
	// B at a field on the normal curve and H at μ_max may be limited.
	for _, doc := range []string{"kind: grade\nname: x\nlimits:\n  - {figure: b_at_800_a_m, min: 1.5, unit: T}\n  - {figure: b_at_2p5_a_m, min: 0.01}\n  - {figure: H_mu_max, max: 300}\n"} {
		if _, err := Parse("g.yaml", []byte(doc)); err != nil {
			t.Errorf("%q: %v", doc, err)
		}
	}
	for _, tc := range cases {
		_, err := Parse("g.yaml", []byte(tc.doc))
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%q: got %v, want %q", tc.doc, err, tc.want)
		}
	}
}

// TestSampleGrades: the shipped grades load, and the demo specimen's grade is among them.
func TestSampleGrades(t *testing.T) {
	set, err := LoadFS(configs.Samples, ".", "configs")
	if err != nil {
		t.Fatal(err)
	}
	for _, n := range []string{"NO-R470", "FX-26"} {
		if _, err := set.Lookup(n); err != nil {
			t.Error(err)
		}
	}
}
