// Package storetest is the one test suite every hystd store passes: the
// record.Reader and record.Writer contracts and the forwarder's outbox
// contract (store.Outbox), including that a loop and its outbox entry are
// committed together or not at all.
//
// Use it from a _test.go file:
//
//	func TestSuite(t *testing.T) { storetest.Run(t, func(t *testing.T) storetest.Backend { ... }) }
package storetest

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"math"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/acq/store"
)

// Backend is a store under test: the record interfaces and the outbox.
type Backend interface {
	record.Reader
	record.Writer
	record.Reviser
	store.Outbox
}

// Open returns a fresh, empty backend; the factory registers its own cleanup.
type Open func(t *testing.T) Backend

// Run runs every case of the suite against backends made by open.
func Run(t *testing.T, open Open) {
	cases := []struct {
		name string
		fn   func(t *testing.T, b Backend)
	}{
		{"RunRoundTrip", testRunRoundTrip},
		{"RunDuplicate", testRunDuplicate},
		{"RunNotFound", testRunNotFound},
		{"RunsNewestFirstAndFilters", testRunsFilter},
		{"SetState", testSetState},
		{"LoopRoundTrip", testLoopRoundTrip},
		{"LoopFloatsExact", testLoopFloatsExact},
		{"LoopsSummary", testLoopsSummary},
		{"LoopRejected", testLoopRejected},
		{"Events", testEvents},
		{"Trend", testTrend},
		{"OutboxWithLoop", testOutboxWithLoop},
		{"OutboxLifecycle", testOutboxLifecycle},
		{"OutboxQuarantine", testOutboxQuarantine},
		{"Revisions", testRevisions},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) { c.fn(t, open(t)) })
	}
}

var t0 = time.Date(2026, 3, 14, 9, 30, 0, 123456789, time.UTC)

// SampleRun returns a run with every field set, for tests.
func SampleRun(id string, started time.Time) record.Run {
	cfg := "kind: fixture\nname: bench-ring-2\n"
	sum := sha256.Sum256([]byte(cfg))
	return record.Run{
		ID: id, Recipe: "ring-loop-1k", RecipeText: "kind: recipe\nname: ring-loop-1k\n",
		Fixture: "bench-ring-2", Specimen: "R-17", Material: "NiFe 50/50 tape", Grade: "TAPE-50", Operator: "bay 2",
		Config: cfg, ConfigHash: hex.EncodeToString(sum[:]), Software: "0.1.0-test",
		State: record.Queued, Queued: started.Add(-time.Second), Started: started,
	}
}

// SampleLoop returns loop n of a run with nRaw raw samples, one point per
// raw sample of the sweep, two figures and one correction. Every third
// sample lacks the field-meter channel (NaN), as on a fixture without one.
func SampleLoop(runID string, n, nRaw int, started time.Time) record.Loop {
	l := record.Loop{RunID: runID, N: n, Kind: "loop", Amplitude: 8000, AmpUnit: "A/m", Started: started}
	for i := 0; i < nRaw; i++ {
		ph := record.Sweep
		switch {
		case i < nRaw/10:
			ph = record.PreHold
		case i >= nRaw-nRaw/10:
			ph = record.PostHold
		}
		x := float64(i) / float64(nRaw)
		s := record.Sample{
			T: time.Duration(i) * 2 * time.Millisecond, TUnc: 150 * time.Microsecond, Phase: ph,
			Setpoint: 2 * math.Sin(2*math.Pi*x), I: 2*math.Sin(2*math.Pi*x) + 1e-4, V: 0.5 * math.Cos(2*math.Pi*x),
			Psi: 1e-3 * math.Tanh(3*math.Sin(2*math.Pi*x)), BProbe: math.NaN(), TempC: 23.5 + x,
		}
		s.DtI = -time.Duration(400+i%7) * time.Microsecond // the current read before the flux
		if i%3 != 0 {
			s.BProbe = 0.01 * x
			s.DtB = time.Duration(250+i%5) * time.Microsecond
		}
		l.Raw = append(l.Raw, s)
		if ph == record.Sweep {
			br := 1
			if math.Cos(2*math.Pi*x) < 0 {
				br = -1
			}
			h := 8000 * math.Sin(2*math.Pi*x)
			b := 1.2 * math.Tanh(3*math.Sin(2*math.Pi*x))
			l.Points = append(l.Points, record.Point{T: s.T, H: h, B: b, J: b - 1.25663706212e-6*h, Branch: br})
		}
	}
	l.Figures = []record.Figure{
		{Name: "Br", Value: 0.61 + 0.01*float64(n), U: 0.004, Unit: "T", Note: "mean of both branches"},
		{Name: "HcB", Value: 12.5, U: math.NaN(), Unit: "A/m", Note: "interpolated"},
	}
	l.Corrections = []record.Correction{{Name: "drift-baseline", Size: -2.5e-7, Unit: "Wb", Note: "linear"}}
	l.Verdicts = []record.Verdict{
		{Grade: "TAPE-50", Figure: "Br", Value: l.Figures[0].Value, U: 0.004, Min: 0.5, Max: math.NaN(), Unit: "T",
			Rule: "guarded-U", Outcome: record.Pass, Note: "loop"},
		{Grade: "TAPE-50", Figure: "HcB", Value: 12.5, U: math.NaN(), Min: math.NaN(), Max: 20, Unit: "A/m",
			Rule: "guarded-U", Outcome: record.Undecided, Note: "U not evaluated"},
	}
	return l
}

func ctx() context.Context { return context.Background() }

func must(t *testing.T, err error) {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
}

func sameRun(t *testing.T, got, want record.Run) {
	t.Helper()
	if !got.Queued.Equal(want.Queued) || !got.Started.Equal(want.Started) || !got.Ended.Equal(want.Ended) {
		t.Errorf("run %s times: got %v/%v/%v, want %v/%v/%v", want.ID, got.Queued, got.Started, got.Ended, want.Queued, want.Started, want.Ended)
	}
	got.Queued, got.Started, got.Ended = want.Queued, want.Started, want.Ended
	want.Revision = max(want.Revision, 1) // a created run is revision 1
	if got != want {
		t.Errorf("run:\n got %+v\nwant %+v", got, want)
	}
}

// same reports float equality with NaN equal to NaN.
func same(a, b float64) bool { return a == b || (math.IsNaN(a) && math.IsNaN(b)) }

// SameLoop reports the first difference between two loops, or "".
func SameLoop(got, want record.Loop) string {
	if got.RunID != want.RunID || got.N != want.N || got.Kind != want.Kind || !same(got.Amplitude, want.Amplitude) ||
		got.AmpUnit != want.AmpUnit || !got.Started.Equal(want.Started) || max(got.Revision, 1) != max(want.Revision, 1) || got.Ramped != want.Ramped {
		return fmt.Sprintf("header: got %v %d %q %g %q %v rev %d ramped %v, want %v %d %q %g %q %v rev %d ramped %v", got.RunID, got.N, got.Kind, got.Amplitude,
			got.AmpUnit, got.Started, got.Revision, got.Ramped, want.RunID, want.N, want.Kind, want.Amplitude, want.AmpUnit, want.Started, want.Revision, want.Ramped)
	}
	if d := firstDiff("raw: %d samples, want %d", "raw", got.Raw, want.Raw, sameSample); d != "" {
		return d
	}
	if d := firstDiff("points: %d, want %d", "point", got.Points, want.Points, samePoint); d != "" {
		return d
	}
	return sameDerived(got, want)
}

func sameDerived(got, want record.Loop) string {
	if d := firstDiff("figures: %d, want %d", "figure", got.Figures, want.Figures, sameFigure); d != "" {
		return d
	}
	if d := firstDiff("corrections: %d, want %d", "correction", got.Corrections, want.Corrections, sameCorrection); d != "" {
		return d
	}
	return firstDiff("verdicts: %d, want %d", "verdict", got.Verdicts, want.Verdicts, sameVerdict)
}

// firstDiff reports a difference in length (with the format count, given
// both lengths) or the first element that differs (as "item N: got …,
// want …"), or "".
func firstDiff[T any](count, item string, got, want []T, eq func(g, w T) bool) string {
	if len(got) != len(want) {
		return fmt.Sprintf(count, len(got), len(want))
	}
	for i, w := range want {
		if g := got[i]; !eq(g, w) {
			return fmt.Sprintf("%s %d: got %+v, want %+v", item, i, g, w)
		}
	}
	return ""
}

func sameSample(g, w record.Sample) bool {
	return g.T == w.T && g.TUnc == w.TUnc && g.DtI == w.DtI && g.DtB == w.DtB && g.Phase == w.Phase && same(g.Setpoint, w.Setpoint) &&
		same(g.I, w.I) && same(g.V, w.V) && same(g.Psi, w.Psi) && same(g.BProbe, w.BProbe) && same(g.TempC, w.TempC)
}

func samePoint(g, w record.Point) bool {
	return g.T == w.T && same(g.H, w.H) && same(g.B, w.B) && same(g.J, w.J) && g.Branch == w.Branch
}

func sameFigure(g, w record.Figure) bool {
	return g.Name == w.Name && same(g.Value, w.Value) && same(g.U, w.U) && g.Unit == w.Unit && g.Note == w.Note
}

func sameCorrection(g, w record.Correction) bool {
	return g.Name == w.Name && same(g.Size, w.Size) && g.Unit == w.Unit && g.Note == w.Note
}

func sameVerdict(g, w record.Verdict) bool {
	return g.Grade == w.Grade && g.Figure == w.Figure && same(g.Value, w.Value) && same(g.U, w.U) && same(g.Min, w.Min) &&
		same(g.Max, w.Max) && g.Unit == w.Unit && g.Rule == w.Rule && g.Outcome == w.Outcome && g.Note == w.Note
}

func testRunRoundTrip(t *testing.T, b Backend) {
	want := SampleRun("run-a", t0)
	must(t, b.CreateRun(ctx(), want))
	got, err := b.Run(ctx(), "run-a")
	must(t, err)
	sameRun(t, got, want)

	// A run with no times set keeps them zero; a missing config hash is
	// computed: SHA-256 of the empty string (FIPS 180-4 test vector, as
	// published with the standard's examples).
	bare := record.Run{ID: "run-bare", State: record.Queued}
	must(t, b.CreateRun(ctx(), bare))
	got, err = b.Run(ctx(), "run-bare")
	must(t, err)
	bare.ConfigHash = "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
	sameRun(t, got, bare)
}

func testRunDuplicate(t *testing.T, b Backend) {
	must(t, b.CreateRun(ctx(), SampleRun("run-a", t0)))
	if err := b.CreateRun(ctx(), SampleRun("run-a", t0.Add(time.Hour))); !errors.Is(err, store.ErrExists) {
		t.Fatalf("second CreateRun: %v, want ErrExists", err)
	}
	if err := b.CreateRun(ctx(), record.Run{}); err == nil {
		t.Fatal("CreateRun with empty id succeeded")
	}
	bad := SampleRun("run-bad-hash", t0)
	bad.ConfigHash = "00ff"
	if err := b.CreateRun(ctx(), bad); err == nil {
		t.Fatal("CreateRun with a wrong config hash succeeded")
	}
	if _, err := b.Run(ctx(), "run-bad-hash"); !errors.Is(err, record.ErrNotFound) {
		t.Fatalf("rejected run was stored: %v", err)
	}
	got, err := b.Run(ctx(), "run-a")
	must(t, err)
	if !got.Started.Equal(t0) {
		t.Fatalf("duplicate changed the run: started %v", got.Started)
	}
}

func testRunNotFound(t *testing.T, b Backend) {
	checks := []struct {
		name string
		err  error
	}{
		{"Run", func() error { _, err := b.Run(ctx(), "nope"); return err }()},
		{"Loop", func() error { _, err := b.Loop(ctx(), "nope", 1); return err }()},
		{"Loops", func() error { _, err := b.Loops(ctx(), "nope"); return err }()},
		{"Events", func() error { _, err := b.Events(ctx(), "nope"); return err }()},
		{"SetState", b.SetState(ctx(), "nope", record.Running, "", t0)},
		{"AddEvent", b.AddEvent(ctx(), record.Event{RunID: "nope", At: t0, Level: "info", Text: "x"})},
		{"AddLoop", b.AddLoop(ctx(), SampleLoop("nope", 1, 10, t0))},
	}
	for _, c := range checks {
		if !errors.Is(c.err, record.ErrNotFound) {
			t.Errorf("%s of unknown run: %v, want ErrNotFound", c.name, c.err)
		}
	}
	must(t, b.CreateRun(ctx(), SampleRun("run-a", t0)))
	if _, err := b.Loop(ctx(), "run-a", 1); !errors.Is(err, record.ErrNotFound) {
		t.Errorf("Loop 1 of run without loops: %v, want ErrNotFound", err)
	}
}

func testRunsFilter(t *testing.T, b Backend) {
	specs := []struct {
		id, fixture, specimen string
		at                    time.Duration
	}{
		{"r1", "bench-ring-2", "R-17", 0},
		{"r2", "yoke-1", "M-4", time.Hour},
		{"r3", "bench-ring-2", "R-18", 2 * time.Hour},
		{"r4", "bench-ring-2", "R-17", 3 * time.Hour},
	}
	for _, s := range specs {
		r := SampleRun(s.id, t0.Add(s.at))
		r.Fixture, r.Specimen = s.fixture, s.specimen
		must(t, b.CreateRun(ctx(), r))
	}
	must(t, b.SetState(ctx(), "r3", record.Running, "", t0.Add(2*time.Hour)))
	ids := func(rs []record.Run) (out []string) {
		for _, r := range rs {
			out = append(out, r.ID)
		}
		return out
	}
	tests := []struct {
		name string
		f    record.RunFilter
		want []string
	}{
		{"all newest first", record.RunFilter{}, []string{"r4", "r3", "r2", "r1"}},
		{"fixture", record.RunFilter{Fixture: "bench-ring-2"}, []string{"r4", "r3", "r1"}},
		{"specimen", record.RunFilter{Specimen: "R-17"}, []string{"r4", "r1"}},
		{"state", record.RunFilter{State: record.Running}, []string{"r3"}},
		{"since until", record.RunFilter{Since: t0.Add(time.Hour), Until: t0.Add(3 * time.Hour)}, []string{"r3", "r2"}},
		{"limit", record.RunFilter{Limit: 2}, []string{"r4", "r3"}},
		{"no match", record.RunFilter{Material: "none"}, nil},
	}
	for _, tc := range tests {
		rs, err := b.Runs(ctx(), tc.f)
		must(t, err)
		if fmt.Sprint(ids(rs)) != fmt.Sprint(tc.want) {
			t.Errorf("%s: got %v, want %v", tc.name, ids(rs), tc.want)
		}
	}
}

func testSetState(t *testing.T, b Backend) {
	r := SampleRun("run-a", time.Time{})
	must(t, b.CreateRun(ctx(), r))
	must(t, b.SetState(ctx(), "run-a", record.Running, "", t0))
	got, err := b.Run(ctx(), "run-a")
	must(t, err)
	if got.State != record.Running || !got.Started.Equal(t0) {
		t.Fatalf("after Running: %s started %v", got.State, got.Started)
	}
	end := t0.Add(90 * time.Second)
	must(t, b.SetState(ctx(), "run-a", record.Aborted, "operator abort", end))
	got, err = b.Run(ctx(), "run-a")
	must(t, err)
	if got.State != record.Aborted || got.Reason != "operator abort" || !got.Ended.Equal(end) || !got.Started.Equal(t0) {
		t.Fatalf("after Aborted: %+v", got)
	}
	if err := b.SetState(ctx(), "run-a", record.Finished, "", end); err == nil {
		t.Fatal("an ended run changed state")
	}
	if err := b.SetState(ctx(), "run-a", "paused", "", end); err == nil {
		t.Fatal("unknown state accepted")
	}
}

func testLoopRoundTrip(t *testing.T, b Backend) {
	must(t, b.CreateRun(ctx(), SampleRun("run-a", t0)))
	want := SampleLoop("run-a", 1, 500, t0.Add(time.Second))
	must(t, b.AddLoop(ctx(), want))
	got, err := b.Loop(ctx(), "run-a", 1)
	must(t, err)
	if d := SameLoop(got, want); d != "" {
		t.Fatal(d)
	}
	if !math.IsNaN(got.Raw[0].BProbe) || !math.IsNaN(got.Figures[1].U) {
		t.Fatal("NaN channel did not read back as NaN")
	}
	// A loop without samples (figures only) is kept too, and a ramped
	// sweep reads back as ramped (the first loop as stepped).
	empty := record.Loop{RunID: "run-a", N: 2, Kind: "demag-curve", Amplitude: math.NaN(), Figures: want.Figures, Ramped: true}
	must(t, b.AddLoop(ctx(), empty))
	got, err = b.Loop(ctx(), "run-a", 2)
	must(t, err)
	if d := SameLoop(got, empty); d != "" {
		t.Fatal(d)
	}
}

// testLoopFloatsExact: float64 values come back bit for bit. SQLite stores
// REAL as an 8-byte IEEE 754 binary64 (sqlite.org, "Datatypes In SQLite",
// §2); the values are the extremes of that format (IEEE 754-2008 Table 3.5)
// and ±Inf.
func testLoopFloatsExact(t *testing.T, b Backend) {
	must(t, b.CreateRun(ctx(), SampleRun("run-a", t0)))
	vals := []float64{math.MaxFloat64, -math.MaxFloat64, math.SmallestNonzeroFloat64, 2.2250738585072014e-308,
		1.25663706212e-6, 0.1, 1 / 3.0, math.Inf(1), math.Inf(-1), 123456789, 1e300}
	l := record.Loop{RunID: "run-a", N: 1, Kind: "loop"}
	for i, v := range vals {
		l.Raw = append(l.Raw, record.Sample{T: time.Duration(i), Phase: record.Sweep, Setpoint: v, I: v, V: v, Psi: v, BProbe: v, TempC: v})
		l.Points = append(l.Points, record.Point{T: time.Duration(i), H: v, B: v, J: v})
	}
	must(t, b.AddLoop(ctx(), l))
	got, err := b.Loop(ctx(), "run-a", 1)
	must(t, err)
	for i, v := range vals {
		if math.Float64bits(got.Raw[i].Psi) != math.Float64bits(v) || math.Float64bits(got.Points[i].H) != math.Float64bits(v) {
			t.Errorf("value %d: stored %v, read %v / %v", i, v, got.Raw[i].Psi, got.Points[i].H)
		}
	}
}

func testLoopsSummary(t *testing.T, b Backend) {
	must(t, b.CreateRun(ctx(), SampleRun("run-a", t0)))
	loop := func(n int) record.Loop {
		l := SampleLoop("run-a", n, 50, t0.Add(time.Duration(n)*time.Minute))
		l.Ramped = n == 2
		return l
	}
	for n := 1; n <= 3; n++ {
		must(t, b.AddLoop(ctx(), loop(n)))
	}
	ls, err := b.Loops(ctx(), "run-a")
	must(t, err)
	if len(ls) != 3 {
		t.Fatalf("%d loops, want 3", len(ls))
	}
	for i, l := range ls {
		want := loop(i + 1)
		if l.Raw != nil || l.Points != nil {
			t.Errorf("loop %d: Loops returned samples", l.N)
		}
		want.Raw, want.Points = nil, nil
		if d := SameLoop(l, want); d != "" {
			t.Errorf("loop %d: %s", i+1, d)
		}
	}
	ls, err = b.Loops(ctx(), func() string { must(t, b.CreateRun(ctx(), SampleRun("run-b", t0))); return "run-b" }())
	must(t, err)
	if len(ls) != 0 {
		t.Fatalf("run without loops: %d loops", len(ls))
	}
}

func testLoopRejected(t *testing.T, b Backend) {
	must(t, b.CreateRun(ctx(), SampleRun("run-a", t0)))
	must(t, b.AddLoop(ctx(), SampleLoop("run-a", 1, 30, t0)))
	dup := SampleLoop("run-a", 1, 60, t0)
	if err := b.AddLoop(ctx(), dup); !errors.Is(err, store.ErrExists) {
		t.Fatalf("duplicate loop: %v, want ErrExists", err)
	}
	if err := b.AddLoop(ctx(), SampleLoop("run-a", 0, 10, t0)); err == nil {
		t.Fatal("loop number 0 accepted")
	}
	got, err := b.Loop(ctx(), "run-a", 1)
	must(t, err)
	if len(got.Raw) != 30 {
		t.Fatalf("duplicate changed the loop: %d raw samples", len(got.Raw))
	}
	p, err := b.Pending(ctx(), 0)
	must(t, err)
	if len(p) != 1 {
		t.Fatalf("%d outbox entries after rejected loops, want 1", len(p))
	}
}

func testEvents(t *testing.T, b Backend) {
	must(t, b.CreateRun(ctx(), SampleRun("run-a", t0)))
	want := []record.Event{
		{RunID: "run-a", At: t0, Level: "info", Text: "demagnetize"},
		{RunID: "run-a", At: t0.Add(-time.Second), Level: "warn", Text: "integrator drift 2 µV"},
		{RunID: "run-a", At: t0.Add(time.Minute), Level: "error", Text: "supply compliance"},
	}
	for _, e := range want {
		must(t, b.AddEvent(ctx(), e))
	}
	got, err := b.Events(ctx(), "run-a")
	must(t, err)
	if len(got) != len(want) {
		t.Fatalf("%d events, want %d", len(got), len(want))
	}
	for i := range want {
		if got[i].Text != want[i].Text || got[i].Level != want[i].Level || !got[i].At.Equal(want[i].At) || got[i].RunID != "run-a" {
			t.Errorf("event %d: got %+v, want %+v (insertion order)", i, got[i], want[i])
		}
	}
}

func testTrend(t *testing.T, b Backend) {
	for i, id := range []string{"r1", "r2", "r3"} {
		r := SampleRun(id, t0.Add(time.Duration(i)*24*time.Hour))
		if id == "r2" {
			r.Specimen = "other"
		}
		must(t, b.CreateRun(ctx(), r))
		for n := 1; n <= 2; n++ {
			must(t, b.AddLoop(ctx(), SampleLoop(id, n, 20, r.Started.Add(time.Duration(n)*time.Minute))))
		}
	}
	got, err := b.Trend(ctx(), "R-17", "Br", time.Time{})
	must(t, err)
	type key struct {
		run string
		n   int
	}
	var keys []key
	for _, p := range got {
		keys = append(keys, key{p.RunID, p.Loop})
		if want := 0.61 + 0.01*float64(p.Loop); !same(p.Value, want) || p.U != 0.004 {
			t.Errorf("trend %s/%d: %g ± %g, want %g ± 0.004", p.RunID, p.Loop, p.Value, p.U, want)
		}
	}
	if fmt.Sprint(keys) != "[{r1 1} {r1 2} {r3 1} {r3 2}]" {
		t.Fatalf("trend points %v, want r1/1 r1/2 r3/1 r3/2 oldest first", keys)
	}
	got, err = b.Trend(ctx(), "R-17", "HcB", t0.Add(47*time.Hour))
	must(t, err)
	if len(got) != 2 || got[0].RunID != "r3" || !math.IsNaN(got[0].U) {
		t.Fatalf("trend since: %+v", got)
	}
	if !got[0].At.Equal(t0.Add(48*time.Hour + time.Minute)) {
		t.Fatalf("trend time %v, want the loop start", got[0].At)
	}
}

func testOutboxWithLoop(t *testing.T, b Backend) {
	bl, err := b.Backlog(ctx())
	must(t, err)
	if bl.Pending != 0 || !bl.Oldest.IsZero() {
		t.Fatalf("empty store backlog %+v", bl)
	}
	must(t, b.CreateRun(ctx(), SampleRun("run-a", t0)))
	for n := 1; n <= 3; n++ {
		must(t, b.AddLoop(ctx(), SampleLoop("run-a", n, 20, t0)))
	}
	// A loop of an unknown run stores nothing, not even its outbox entry.
	if err := b.AddLoop(ctx(), SampleLoop("ghost", 1, 20, t0)); err == nil {
		t.Fatal("loop of unknown run stored")
	}
	p, err := b.Pending(ctx(), 0)
	must(t, err)
	if len(p) != 3 {
		t.Fatalf("%d pending, want 3", len(p))
	}
	for i, e := range p {
		if e.RunID != "run-a" || e.Loop != i+1 || e.Done != 0 || e.State != store.StatePending || e.Created.IsZero() {
			t.Errorf("entry %d: %+v", i, e)
		}
		if i > 0 && e.ID <= p[i-1].ID {
			t.Errorf("entries not oldest first: %d after %d", e.ID, p[i-1].ID)
		}
	}
	p2, err := b.Pending(ctx(), 2)
	must(t, err)
	if len(p2) != 2 || p2[0].ID != p[0].ID {
		t.Fatalf("Pending(2): %+v", p2)
	}
	bl, err = b.Backlog(ctx())
	must(t, err)
	if bl.Pending != 3 || !bl.Oldest.Equal(p[0].Created) || bl.Quarantined != 0 {
		t.Fatalf("backlog %+v, want 3 pending since %v", bl, p[0].Created)
	}
}

func testOutboxLifecycle(t *testing.T, b Backend) {
	must(t, b.CreateRun(ctx(), SampleRun("run-a", t0)))
	must(t, b.AddLoop(ctx(), SampleLoop("run-a", 1, 20, t0)))
	must(t, b.AddLoop(ctx(), SampleLoop("run-a", 2, 20, t0)))
	p, err := b.Pending(ctx(), 0)
	must(t, err)
	id := p[0].ID
	must(t, b.Progress(ctx(), id, 10))
	must(t, b.Progress(ctx(), id, 5)) // never goes back
	must(t, b.Retry(ctx(), id, "connection refused"))
	must(t, b.Retry(ctx(), id, "503 unavailable"))
	p, err = b.Pending(ctx(), 0)
	must(t, err)
	if p[0].Done != 10 || p[0].Attempts != 2 || p[0].LastError != "503 unavailable" {
		t.Fatalf("after progress and retries: %+v", p[0])
	}
	if err := b.Progress(ctx(), id, -1); err == nil {
		t.Fatal("negative progress accepted")
	}
	must(t, b.Delivered(ctx(), id))
	p, err = b.Pending(ctx(), 0)
	must(t, err)
	if len(p) != 1 || p[0].Loop != 2 {
		t.Fatalf("after delivery pending %+v, want loop 2 only", p)
	}
	for name, err := range map[string]error{
		"Delivered twice":        b.Delivered(ctx(), id),
		"Progress delivered":     b.Progress(ctx(), id, 20),
		"Retry delivered":        b.Retry(ctx(), id, "x"),
		"Quarantine delivered":   b.Quarantine(ctx(), id, "x"),
		"Delivered unknown":      b.Delivered(ctx(), 1<<40),
		"Progress unknown entry": b.Progress(ctx(), 1<<40, 1),
	} {
		if !errors.Is(err, record.ErrNotFound) {
			t.Errorf("%s: %v, want ErrNotFound", name, err)
		}
	}
	bl, err := b.Backlog(ctx())
	must(t, err)
	if bl.Pending != 1 || !bl.Oldest.Equal(p[0].Created) {
		t.Fatalf("backlog %+v", bl)
	}
}

func testOutboxQuarantine(t *testing.T, b Backend) {
	must(t, b.CreateRun(ctx(), SampleRun("run-a", t0)))
	must(t, b.AddLoop(ctx(), SampleLoop("run-a", 1, 20, t0)))
	must(t, b.AddLoop(ctx(), SampleLoop("run-a", 2, 20, t0)))
	p, err := b.Pending(ctx(), 0)
	must(t, err)
	msg := `400 Bad Request: unable to parse 'hyst_sample,run=x H=': missing field value`
	must(t, b.Quarantine(ctx(), p[0].ID, msg))
	bl, err := b.Backlog(ctx())
	must(t, err)
	if bl.Pending != 1 || bl.Quarantined != 1 || !bl.Oldest.Equal(p[1].Created) {
		t.Fatalf("backlog %+v, want 1 pending (loop 2), 1 quarantined", bl)
	}
	p2, err := b.Pending(ctx(), 0)
	must(t, err)
	if len(p2) != 1 || p2[0].ID != p[1].ID {
		t.Fatalf("pending after quarantine: %+v", p2)
	}
	// The loop itself stays in the store.
	if _, err := b.Loop(ctx(), "run-a", 1); err != nil {
		t.Fatalf("quarantined loop: %v", err)
	}
}

// revisionOf returns revision n of run r with a changed specimen and the
// loops of r's revision 1 (given) with B halved, as a re-process with twice
// the cross-section would make them.
func revisionOf(r record.Run, n int, by string, loops []record.Loop) (record.Revision, []record.Loop) {
	cfg := fmt.Sprintf("# specimen\nid: %s-x%d\n", r.Specimen, n)
	sum := sha256.Sum256([]byte(cfg))
	v := record.Revision{RunID: r.ID, N: n, At: t0.Add(time.Duration(n) * time.Hour), By: by,
		Change: "specimen: area 50 → 100 mm²", Fixture: r.Fixture, Specimen: fmt.Sprintf("%s-x%d", r.Specimen, n),
		Material: r.Material, Grade: "", Config: cfg, ConfigHash: hex.EncodeToString(sum[:])}
	var out []record.Loop
	for _, l := range loops {
		l.Revision = n
		l.Points = append([]record.Point(nil), l.Points...)
		for i := range l.Points {
			l.Points[i].B /= 2
		}
		l.Figures = append([]record.Figure(nil), l.Figures...)
		for i := range l.Figures {
			l.Figures[i].Value /= 2
		}
		l.Verdicts = nil
		out = append(out, l)
	}
	return v, out
}

func testRevisions(t *testing.T, b Backend) {
	run := SampleRun("run-r", t0)
	must(t, b.CreateRun(ctx(), run))
	var orig []record.Loop
	for n := 1; n <= 2; n++ {
		l := SampleLoop(run.ID, n, 30, t0.Add(time.Duration(n)*time.Minute))
		must(t, b.AddLoop(ctx(), l))
		orig = append(orig, l)
	}
	revs, err := b.Revisions(ctx(), run.ID)
	must(t, err)
	if len(revs) != 1 || revs[0].N != 1 || revs[0].Specimen != run.Specimen || revs[0].By != run.Operator || revs[0].Config != run.Config {
		t.Fatalf("revisions of a new run: %+v", revs)
	}
	v2, l2 := revisionOf(run, 2, "alba", orig)
	// Refused, storing nothing: a run still running, a revision that is not
	// the next, a wrong config hash, a loop the run does not have.
	if err := b.AddRevision(ctx(), v2, l2); err == nil {
		t.Fatal("revision of a queued run stored")
	}
	must(t, b.SetState(ctx(), run.ID, record.Running, "", t0))
	must(t, b.SetState(ctx(), run.ID, record.Finished, "", t0.Add(time.Hour)))
	run.State, run.Ended = record.Finished, t0.Add(time.Hour)
	checkRevisionRefusals(t, b, run, orig, v2, l2)
	must(t, b.AddRevision(ctx(), v2, l2))
	if err := b.AddRevision(ctx(), v2, l2); err == nil {
		t.Fatal("revision 2 stored twice")
	}
	r := checkRevisionHeads(t, b, run, v2)
	checkRevisionLoops(t, b, run, orig, l2)
	checkRevisionOutbox(t, b, run, orig)
	v3, l3 := revisionOf(r, 3, "bo", orig)
	must(t, b.AddRevision(ctx(), v3, l3))
	revs, err = b.Revisions(ctx(), run.ID)
	must(t, err)
	if len(revs) != 3 || revs[2].By != "bo" || revs[1].By != "alba" {
		t.Fatalf("three revisions: %+v", revs)
	}
}

// checkRevisionRefusals checks that revisions of the ended run that skip a
// number, carry a wrong config hash, name a loop the run does not have or
// have no loops are refused, storing nothing.
func checkRevisionRefusals(t *testing.T, b Backend, run record.Run, orig []record.Loop, v2 record.Revision, l2 []record.Loop) {
	v3, _ := revisionOf(run, 3, "alba", orig)
	badHash := v2
	badHash.ConfigHash = "00"
	ghost := append([]record.Loop(nil), l2...)
	ghost[1].N = 7
	for name, c := range map[string]struct {
		v record.Revision
		l []record.Loop
	}{"skips a revision": {v3, l2}, "bad hash": {badHash, l2}, "unknown loop": {v2, ghost}, "no loops": {v2, nil}} {
		if err := b.AddRevision(ctx(), c.v, c.l); err == nil {
			t.Fatalf("%s: stored", name)
		}
		if r, _ := b.Run(ctx(), run.ID); r.Revision != 1 {
			t.Fatalf("%s: run revision %d after a refused revision", name, r.Revision)
		}
		if _, err := b.LoopsOf(ctx(), run.ID, 2); !errors.Is(err, record.ErrNotFound) {
			t.Fatalf("%s: revision 2 readable after a refusal: %v", name, err)
		}
	}
	if p, _ := b.Pending(ctx(), 0); len(p) != 2 {
		t.Fatalf("%d outbox entries after refusals, want 2", len(p))
	}
}

// checkRevisionHeads checks the run row and the revision list once
// revision 2 (v2) is stored, and returns the run as read back.
func checkRevisionHeads(t *testing.T, b Backend, run record.Run, v2 record.Revision) record.Run {
	r, err := b.Run(ctx(), run.ID)
	must(t, err)
	if r.Revision != 2 || r.Specimen != run.Specimen || r.Config != run.Config {
		t.Fatalf("run after revision 2: revision %d, specimen %q (the run row keeps revision 1's)", r.Revision, r.Specimen)
	}
	revs, err := b.Revisions(ctx(), run.ID)
	must(t, err)
	first := record.FirstRevision(run)
	if len(revs) != 2 || revs[0].N != 1 || revs[0].Specimen != first.Specimen || revs[0].ConfigHash != first.ConfigHash ||
		!revs[0].At.Equal(first.At) || revs[0].By != first.By {
		t.Fatalf("revision 1 after a re-process: %+v, want %+v", revs[0], first)
	}
	g := revs[1]
	if g.N != 2 || g.By != "alba" || g.Change != v2.Change || g.Specimen != v2.Specimen || g.Config != v2.Config ||
		g.ConfigHash != v2.ConfigHash || !g.At.Equal(v2.At) || g.Fixture != v2.Fixture {
		t.Fatalf("revision 2: %+v, want %+v", g, v2)
	}
	return r
}

// checkRevisionLoops checks the loops of both revisions once revision 2
// (l2, over the raw samples of orig) is stored.
func checkRevisionLoops(t *testing.T, b Backend, run record.Run, orig, l2 []record.Loop) {
	for n := 1; n <= 2; n++ {
		// Revision 1 reads back exactly as stored; revision 2 has its own
		// points and figures over the same raw samples.
		got, err := b.LoopOf(ctx(), run.ID, n, 1)
		must(t, err)
		if d := SameLoop(got, orig[n-1]); d != "" {
			t.Fatalf("loop %d revision 1: %s", n, d)
		}
		want := l2[n-1]
		want.Raw = orig[n-1].Raw
		for _, rev := range []int{2, 0} {
			got, err = b.LoopOf(ctx(), run.ID, n, rev)
			must(t, err)
			if d := SameLoop(got, want); d != "" {
				t.Fatalf("loop %d revision %d: %s", n, rev, d)
			}
		}
		if got, err = b.Loop(ctx(), run.ID, n); err != nil || SameLoop(got, want) != "" {
			t.Fatalf("Loop(%d) is not the latest revision: %v %s", n, err, SameLoop(got, want))
		}
	}
	ls, err := b.Loops(ctx(), run.ID)
	must(t, err)
	if len(ls) != 2 || ls[0].Revision != 2 || ls[0].Figures[0].Value != orig[0].Figures[0].Value/2 {
		t.Fatalf("Loops after revision 2: %+v", ls)
	}
	ls, err = b.LoopsOf(ctx(), run.ID, 1)
	must(t, err)
	if len(ls) != 2 || ls[0].Figures[0].Value != orig[0].Figures[0].Value || len(ls[0].Verdicts) != len(orig[0].Verdicts) {
		t.Fatalf("LoopsOf revision 1: %+v", ls)
	}
	for _, rev := range []int{3, -1} {
		if _, err := b.LoopOf(ctx(), run.ID, 1, rev); !errors.Is(err, record.ErrNotFound) {
			t.Fatalf("revision %d: %v, want not found", rev, err)
		}
	}
	if _, err := b.Revisions(ctx(), "ghost"); !errors.Is(err, record.ErrNotFound) {
		t.Fatalf("revisions of an unknown run: %v", err)
	}
}

// checkRevisionOutbox checks the outbox and the trend once revision 2 is
// stored.
func checkRevisionOutbox(t *testing.T, b Backend, run record.Run, orig []record.Loop) {
	// The outbox sends revision 2 beside revision 1: nothing is replaced.
	p, err := b.Pending(ctx(), 0)
	must(t, err)
	var got []string
	for _, e := range p {
		got = append(got, fmt.Sprintf("%d/%d", e.Revision, e.Loop))
	}
	if fmt.Sprint(got) != "[1/1 1/2 2/1 2/2]" {
		t.Fatalf("outbox entries (revision/loop) %v", got)
	}
	// The trend follows the latest revision.
	tr, err := b.Trend(ctx(), run.Specimen, "Br", time.Time{})
	must(t, err)
	if len(tr) != 2 || tr[0].Value != orig[0].Figures[0].Value/2 {
		t.Fatalf("trend after revision 2: %+v", tr)
	}
}
