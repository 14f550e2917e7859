package daemon

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/config"
	"hystd/acq/engine"
	"hystd/acq/live"
	"hystd/acq/process"
	"hystd/acq/record"
	"hystd/acq/store"
)

// TestCalibrationOnBench: `hystd run` on the simulated bench with a
// calibrations folder. The record for the bench's integrator (found by the
// *IDN? reply the first run recorded) has gain g = 1.01: every ψ reading
// is divided by g before processing (ψ = (reading − offset)/g, the record's
// definition), and the ring fixture has no air-flux term (coil_area_mm2: 0),
// so B = ψ/(N2·A) and the B-figures (Bmax, Br, and the loss ∮H dB) of the
// stored loop are those of its own stored raw samples processed without the
// record, divided by g exactly (to rounding); H-figures are unchanged. A
// record past due gives a warning event; with calibration_past_due: refuse
// the run ends before any current flows — by the bench's own truth.
func TestCalibrationOnBench(t *testing.T) {
	if testing.Short() {
		t.Skip("three runs on the simulated bench")
	}
	bd := benchFiles(t, nil)
	rp := filepath.Join(bd.dir, "short.yaml")
	calDir := filepath.Join(bd.dir, "cal")
	if err := os.WriteFile(rp, []byte(shortLoop), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.Mkdir(calDir, 0o755); err != nil {
		t.Fatal(err)
	}
	daemonYAML := func(extra string) {
		t.Helper()
		body := fmt.Sprintf("kind: daemon\nhttp: {addr: \"127.0.0.1:0\"}\nstore: {path: %s}\n%sfixtures:\n  - {fixture: fixture.yaml, specimen: specimen.yaml}\n", bd.db, extra)
		if err := os.WriteFile(filepath.Join(bd.dir, "daemon.yaml"), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	runOnce := func() (record.Run, error) {
		t.Helper()
		o := RunOptions{ConfigPath: filepath.Join(bd.dir, "daemon.yaml"), RecipePath: rp, Out: &syncBuf{},
			Wiring: Wiring{Software: "test", Stderr: bd.logs, Signals: make(chan os.Signal), Clock: bd.clock}}
		return RunOnce(context.Background(), o)
	}
	st, err := store.Open(context.Background(), bd.db)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	events := func(id string) []record.Event {
		t.Helper()
		evs, err := st.Events(context.Background(), id)
		if err != nil {
			t.Fatal(err)
		}
		return evs
	}

	daemonYAML("")
	plain, err := runOnce()
	if err != nil || plain.State != record.Finished {
		t.Fatalf("plain run %s %q: %v", plain.State, plain.Reason, err)
	}
	var idn string
	for _, e := range events(plain.ID) {
		if rest, ok := strings.CutPrefix(e.Text, engine.IdentityPrefix+"integrator: "); ok {
			idn = rest
		}
	}
	if idn == "" {
		t.Fatal("the plain run recorded no integrator identity")
	}
	writeCal := func(file, id, due string) {
		t.Helper()
		body := fmt.Sprintf("kind: calibration\nid: %s\napplies_to: {role: integrator, identity: %q}\ncertificate: CERT-%s\ndate: 2025-02-01\ndue: %s\nintegrator:\n  gain: {value: 1.01, u: 0.002}\n", id, idn, id, due)
		if err := os.WriteFile(filepath.Join(calDir, file), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}

	// In force (the bench's clock is at 2026-03-02).
	writeCal("int.yaml", "CAL-T-1", "2027-02-01")
	daemonYAML("calibrations: cal\n")
	cal, err := runOnce()
	if err != nil || cal.State != "finished" {
		t.Fatalf("calibrated run %s %q: %v", cal.State, cal.Reason, err)
	}
	evs := events(cal.ID)
	if !hasText(evs, "info", "used calibration CAL-T-1 (integrator "+idn+"; certificate CERT-CAL-T-1, 2025-02-01, due 2027-02-01)") || hasText(evs, "warn", "past due") {
		t.Errorf("calibrated run's events: %v", evs)
	}
	l, err := st.Loop(context.Background(), cal.ID, 1)
	if err != nil {
		t.Fatal(err)
	}
	fx, err := config.LoadFixture(filepath.Join(bd.dir, "fixture.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	sp, err := config.LoadSpecimen(filepath.Join(bd.dir, "specimen.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	setup, _, err := process.SetupFrom(fx, sp)
	if err != nil {
		t.Fatal(err)
	}
	_, raw, _, err := process.Loop(l.Raw, setup) // the stored readings, no record applied
	if err != nil {
		t.Fatal(err)
	}
	val := func(figs []record.Figure, n string) float64 {
		for _, f := range figs {
			if f.Name == n {
				return f.Value
			}
		}
		t.Fatalf("no figure %s", n)
		return 0
	}
	const g = 1.01
	for _, n := range []string{"Bmax", "Br", "loss_j_m3"} {
		want, got := val(raw, n)/g, val(l.Figures, n)
		if rel := math.Abs(got-want) / math.Abs(want); rel > 1e-9 {
			t.Errorf("%s: stored %.12g, uncalibrated/1.01 %.12g (rel %.2g)", n, got, want, rel)
		}
	}
	for _, n := range []string{"Hmax", "HcB"} {
		if want, got := val(raw, n), val(l.Figures, n); math.Abs(got-want) > 1e-9*math.Abs(want) {
			t.Errorf("%s: stored %.12g, uncalibrated %.12g: an H-figure moved", n, got, want)
		}
	}

	// Past due: a warning event, and the run goes on.
	writeCal("int.yaml", "CAL-T-2", "2026-01-31")
	late, err := runOnce()
	if err != nil || late.State != "finished" {
		t.Fatalf("run on a past-due calibration %s %q: %v", late.State, late.Reason, err)
	}
	if evs := events(late.ID); !hasText(evs, "warn", "calibration CAL-T-2 is past due (due 2026-01-31)") {
		t.Errorf("no past-due warning: %v", evs)
	}

	// Refused: no current from the moment the run was asked for.
	daemonYAML("calibrations: cal\ncalibration_past_due: refuse\n")
	before := len(bd.bench.History())
	refused, err := runOnce()
	if err == nil || refused.State != "failed" || !strings.Contains(refused.Reason, "refused: calibration CAL-T-2 (due 2026-01-31) past due") {
		t.Fatalf("refusing config: run %s %q: %v", refused.State, refused.Reason, err)
	}
	for _, h := range bd.bench.History()[before:] {
		if h.Output || math.Abs(float64(h.I)) > 1e-3 {
			t.Fatalf("bench at %s: output %v, I = %g A during a refused run", h.T, h.Output, float64(h.I))
		}
	}
	if stored, _ := bd.run(t, refused.ID); stored.State != "failed" {
		t.Errorf("stored refused run: %s", stored.State)
	}
	bd.assertZero(t)
}

func hasText(evs []record.Event, level, text string) bool {
	for _, e := range evs {
		if e.Level == level && strings.Contains(e.Text, text) {
			return true
		}
	}
	return false
}

// TestDaemonRefusesPastDueCalibration: the daemon (serve) with
// calibration_past_due: refuse and a past-due record for the bench's
// integrator (its profile's maker and model, any serial) ends a submitted
// run failed, naming the record, and the bench's winding never carries
// current after the submission.
func TestDaemonRefusesPastDueCalibration(t *testing.T) {
	if testing.Short() {
		t.Skip("a daemon on the simulated bench")
	}
	bd := startBench(t, func(bd *benchDaemon) {
		dir := filepath.Join(bd.dir, "cal")
		if err := os.Mkdir(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		rec := "kind: calibration\nid: CAL-OLD\napplies_to: {role: integrator, identity: \"HYSTD-SIM,FLUX-INTEGRATOR\"}\n" +
			"certificate: C-OLD\ndate: 2024-01-10\ndue: 2025-01-10\nintegrator:\n  gain: {value: 1.0, u: 0.001}\n"
		if err := os.WriteFile(filepath.Join(dir, "old.yaml"), []byte(rec), 0o644); err != nil {
			t.Fatal(err)
		}
		body := fmt.Sprintf("kind: daemon\nhttp: {addr: \"127.0.0.1:0\"}\nstore: {path: %s}\ncalibrations: cal\ncalibration_past_due: refuse\nfixtures:\n  - {fixture: fixture.yaml, specimen: specimen.yaml}\n", bd.db)
		if err := os.WriteFile(filepath.Join(bd.dir, "daemon.yaml"), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	})
	evs, cancel := bd.hub.Subscribe()
	defer cancel()
	before := len(bd.bench.History())
	id, err := bd.runner.Submit(context.Background(), "aldermoor-ring-2", []byte(shortLoop))
	if err != nil {
		t.Fatal(err)
	}
	deadline := time.After(60 * time.Second)
	for ended := false; !ended; {
		select {
		case e := <-evs:
			ended = e.RunID == id && e.Kind == live.KindState && e.State.Ended()
		case <-deadline:
			t.Fatal("run did not end")
		}
	}
	r, _ := bd.run(t, id)
	if r.State != "failed" || !strings.Contains(r.Reason, "refused: calibration CAL-OLD (due 2025-01-10) past due") {
		t.Errorf("stored %s %q", r.State, r.Reason)
	}
	for _, h := range bd.bench.History()[before:] {
		if h.Output || math.Abs(float64(h.I)) > 1e-3 {
			t.Fatalf("bench at %s: output %v, I = %g A for a refused run", h.T, h.Output, float64(h.I))
		}
	}
	bd.assertZero(t)
}
