package daemon

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"hystd/acq/config"
	"hystd/acq/record"
	"hystd/acq/reprocess"
	"hystd/acq/store"
)

// TestReprocessCalibratedRun: a run on the simulated bench (simulated time)
// with an integrator record of gain g = 1.01 in the config's calibrations
// folder is re-processed with a ring of twice the height, so twice the
// cross-section (A = h·(D − d)/2, IEC 60404-4's mean path; l_m unchanged).
// The record is applied in both revisions (ψ/g, then B = ψ/(N2·A); the ring
// fixture has no air-flux term), so each B-figure of revision 2 is exactly
// half of revision 1's (a factor of 2 is exact in binary floating point and
// the processing is linear in B) and H-figures are unchanged; had revision
// 2 not applied the record its B-figures would be g/2 of revision 1's.
// Revision 2's events name the record. Before that, with the record's file
// missing from the folder, and with a record of the same id whose
// certificate differs, the run is refused naming the record and nothing is
// stored.
func TestReprocessCalibratedRun(t *testing.T) {
	if testing.Short() {
		t.Skip("a run on the simulated bench")
	}
	ctx := context.Background()
	bd := benchFiles(t, nil)
	rp := filepath.Join(bd.dir, "short.yaml")
	calDir := filepath.Join(bd.dir, "cal")
	calFile := filepath.Join(calDir, "int.yaml")
	cfgPath := filepath.Join(bd.dir, "daemon.yaml")
	if err := os.WriteFile(rp, []byte(shortLoop), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.Mkdir(calDir, 0o755); err != nil {
		t.Fatal(err)
	}
	// The bench's integrator by maker and model (its *IDN? fields; any serial).
	writeCal := func(cert string) {
		t.Helper()
		body := "kind: calibration\nid: CAL-R-1\napplies_to: {role: integrator, identity: \"HYSTD-SIM,FLUX-INTEGRATOR\"}\n" +
			"certificate: " + cert + "\ndate: 2025-02-01\ndue: 2027-02-01\nintegrator:\n  gain: {value: 1.01, u: 0.002}\n"
		if err := os.WriteFile(calFile, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	writeCal("CERT-R-1")
	body := fmt.Sprintf("kind: daemon\nhttp: {addr: \"127.0.0.1:0\"}\nstore: {path: %s}\ncalibrations: cal\nfixtures:\n  - {fixture: fixture.yaml, specimen: specimen.yaml}\n", bd.db)
	if err := os.WriteFile(cfgPath, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	run, err := RunOnce(ctx, RunOptions{ConfigPath: cfgPath, RecipePath: rp, Out: &syncBuf{},
		Wiring: Wiring{Software: "test", Stderr: bd.logs, Signals: make(chan os.Signal), Clock: bd.clock}})
	if err != nil || run.State != record.Finished {
		t.Fatalf("calibrated run %s %q: %v", run.State, run.Reason, err)
	}
	bd.assertZero(t)

	st, err := store.Open(ctx, bd.db)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	evs, err := st.Events(ctx, run.ID)
	if err != nil {
		t.Fatal(err)
	}
	used := "used calibration CAL-R-1 (integrator HYSTD-SIM,FLUX-INTEGRATOR; certificate CERT-R-1, 2025-02-01, due 2027-02-01)"
	if !hasText(evs, "info", used) {
		t.Fatalf("the run did not use the record: %v", evs)
	}
	sp, err := config.LoadSpecimen(filepath.Join(bd.dir, "specimen.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	sp.Ring.HeightMM *= 2
	sp.MassKg *= 2
	again := func() (reprocess.Result, error) {
		t.Helper()
		cfg, err := Load(cfgPath) // the folder as it is now, as `hystd reprocess --config` reads it
		if err != nil {
			t.Fatal(err)
		}
		return reprocess.Run(ctx, st, reprocess.Options{RunID: run.ID, Specimen: &sp, By: "alba", Now: bd.clock.Now(),
			Calibrations: cfg.Calibrations, CalibrationsDir: cfg.Config.Calibrations})
	}
	nothingStored := func(what string) {
		t.Helper()
		revs, err := st.Revisions(ctx, run.ID)
		if err != nil || len(revs) != 1 {
			t.Errorf("%s: %d revisions (%v), want 1", what, len(revs), err)
		}
		if now, _ := st.Events(ctx, run.ID); len(now) != len(evs) {
			t.Errorf("%s: %d events, was %d", what, len(now), len(evs))
		}
	}

	// The record missing from the folder.
	if err := os.Remove(calFile); err != nil {
		t.Fatal(err)
	}
	_, err = again()
	if err == nil || !strings.Contains(err.Error(), "used calibration CAL-R-1 (") || !strings.Contains(err.Error(), "does not hold") {
		t.Errorf("record missing: %v", err)
	}
	nothingStored("record missing")

	// A record of the same id and dates under another certificate.
	writeCal("CERT-R-1-REISSUED")
	_, err = again()
	if err == nil || !strings.Contains(err.Error(), "certificate CERT-R-1-REISSUED") || !strings.Contains(err.Error(), "certificate CERT-R-1,") {
		t.Errorf("certificate differs: %v", err)
	}
	nothingStored("certificate differs")

	// The record as the run used it.
	writeCal("CERT-R-1")
	res, err := again()
	if err != nil {
		t.Fatal(err)
	}
	if !hasText(res.Events, "info", "revision 2: "+used) {
		t.Errorf("revision 2 does not name the record: %v", res.Events)
	}
	l1, err := st.LoopOf(ctx, run.ID, 1, 1)
	if err != nil {
		t.Fatal(err)
	}
	l2, err := st.LoopOf(ctx, run.ID, 1, 2)
	if err != nil {
		t.Fatal(err)
	}
	f1, f2 := map[string]record.Figure{}, map[string]record.Figure{}
	for _, f := range l1.Figures {
		f1[f.Name] = f
	}
	for _, f := range l2.Figures {
		f2[f.Name] = f
	}
	for _, n := range []string{"Bmax", "Br", "mu_a", "loss_j_m3"} {
		if f1[n].Value == 0 || f2[n].Value != f1[n].Value/2 {
			t.Errorf("%s: revision 2 %.17g, want exactly half of revision 1's %.17g", n, f2[n].Value, f1[n].Value)
		}
	}
	for _, n := range []string{"Hmax", "HcB"} {
		if f1[n].Unit == "" || f2[n].Value != f1[n].Value {
			t.Errorf("%s: revision 2 %.17g, want revision 1's %.17g", n, f2[n].Value, f1[n].Value)
		}
	}
	if !strings.Contains(f2["Br"].Note, "integrator gain (calibration)") {
		t.Errorf("Br budget of revision 2 without the record: %q", f2["Br"].Note)
	}
}
