package demo

import (
	"context"
	"math"
	"strings"
	"testing"
	"time"

	"hystd/acq/calrec"
	"hystd/acq/record"
	"hystd/acq/reprocess"
	"hystd/acq/store"
	"hystd/configs"
)

// A ramped loop stays ramped through the store and a re-processing: the
// demo with the supply ramping (sweep_mode: ramp) is stored, then
// re-processed with the specimen's stacking factor halved (half the
// metal's area, so B and Br double: B = ψ/(N2·A)); both revisions of the
// loop say it was ramped, so the processing budgets the timing term
// u_t·dH/dt (acq/process, timing) again. H = N1·I/l_m does not depend on
// the area, so HcB and its U come out as recorded. (On simulated time the
// samples' times are exact, TUnc = 0, so the timing term itself is 0
// here; that the flag reaches the processor is TestLoopInfoKeepsRamped in
// acq/reprocess.)
func TestReprocessRampedLoopStaysRamped(t *testing.T) {
	ctx := context.Background()
	var out strings.Builder
	res, err := Run(ctx, Options{DataDir: t.TempDir(), Out: &out, Software: "test", Capture: "buffered", Sweep: "ramp", Clock: simClock()})
	if err != nil || res.Run.State != record.Finished || len(res.Loops) != 2 {
		t.Fatalf("ramped demo: %v %s %s\n%s", err, res.Run.State, res.Run.Reason, out.String())
	}
	if !res.Loops[1].Ramped {
		t.Fatal("the stored ramped loop does not say it was ramped")
	}
	st, err := store.Open(ctx, res.DB)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	revs, err := st.Revisions(ctx, res.Run.ID)
	if err != nil {
		t.Fatal(err)
	}
	snap, err := reprocess.ParseSnapshot(revs[len(revs)-1].Config)
	if err != nil {
		t.Fatal(err)
	}
	sp := snap.Specimen
	if sp.Ring == nil {
		t.Fatalf("demo specimen is not a ring: %+v", sp)
	}
	sf := sp.Ring.StackingFactor
	if sf == 0 {
		sf = 1
	}
	sp.Ring.StackingFactor = sf / 2
	cals, err := calrec.LoadFS(configs.Samples, CalibrationDir, "configs/"+CalibrationDir)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := reprocess.Run(ctx, st, reprocess.Options{RunID: res.Run.ID, Specimen: &sp, By: "test", Now: time.Date(2026, 3, 3, 9, 0, 0, 0, time.UTC),
		Calibrations: cals, CalibrationsDir: "configs/" + CalibrationDir}); err != nil {
		t.Fatal(err)
	}
	before, after := res.Loops[1], func() record.Loop {
		l, err := st.LoopOf(ctx, res.Run.ID, 2, 2)
		if err != nil {
			t.Fatal(err)
		}
		return l
	}()
	if !after.Ramped {
		t.Error("revision 2 of the loop does not say it was ramped")
	}
	b1, _ := figure(before, "Br")
	b2, _ := figure(after, "Br")
	if math.Abs(b2.Value/b1.Value-2) > 1e-6 {
		t.Fatalf("Br %.6g → %.6g after halving the area: not doubled, the change did not apply", b1.Value, b2.Value)
	}
	h1, _ := figure(before, "HcB")
	h2, _ := figure(after, "HcB")
	t.Logf("HcB revision 1: %.6g ± %.4g A/m (%s); revision 2: %.6g ± %.4g A/m (%s)", h1.Value, h1.U, h1.Note, h2.Value, h2.U, h2.Note)
	if math.Abs(h2.Value-h1.Value) > 1e-9*math.Abs(h1.Value) {
		t.Errorf("HcB moved from %.9g to %.9g with the area alone", h1.Value, h2.Value)
	}
	if math.Abs(h2.U-h1.U) > 0.01*h1.U {
		t.Errorf("U(HcB) %.4g A/m after re-processing, %.4g as recorded: the ramp's timing term was not budgeted the same", h2.U, h1.U)
	}
}
