package engine

import (
	"context"
	"strings"
	"testing"

	"hystd/acq/config"
	"hystd/acq/recipe"
	"hystd/acq/record"
)

// TestImplausibleLoopFlagged: a run on an Epstein specimen whose strip length
// was written as 305 m (for 0.305 m) records the geometry warning as an
// event of the run, and a loop whose processing gives |J| of 1802 T (what
// that slip made of a 1.8 T loop) is stored all the same, with an event
// flagging it implausible. The ceiling (2.45 T) is calib/plausible's.
func TestImplausibleLoopFlagged(t *testing.T) {
	r := newRig(t)
	r.sp = config.Specimen{ID: "E-305", Material: "M-demo", Class: "soft", Shape: "epstein", MassKg: 1, DensityKgM3: 7650,
		Epstein: &config.Epstein{StripLengthM: 305, Strips: 28}}
	s := r.setup(t, twoLoops)
	s.Process = func(raw []record.Sample, l recipe.LoopInfo) (Processed, error) {
		return Processed{
			Points:  []record.Point{{H: 1000, B: 1802, J: 1802}, {H: -1000, B: -1802, J: -1802}},
			Figures: []record.Figure{{Name: "Bmax", Value: 1802, Unit: "T"}, {Name: "Hmax", Value: 1000, Unit: "A/m"}}}, nil
	}
	run, err := Run(context.Background(), s)
	if err != nil {
		t.Fatal(err)
	}
	r.assertSafe(t)
	if run.State != record.Finished || len(r.w.Loops) != 2 {
		t.Fatalf("run %s %q with %d loops, want finished with 2 (flagged loops are stored)", run.State, run.Reason, len(r.w.Loops))
	}
	var geom, flagged int
	for _, e := range r.w.Events {
		if e.RunID != run.ID {
			continue
		}
		if strings.Contains(e.Text, "geometry of specimen E-305: epstein: strip length 305.000 m is outside 0.28–0.32 m") && e.Level == "warn" {
			geom++
		}
		if strings.Contains(e.Text, "implausible — check geometry and turns: |J| reaches 1802 T") && e.Level == "warn" {
			flagged++
		}
	}
	if geom != 1 || flagged != 2 {
		t.Errorf("%d geometry warnings (want 1) and %d loops flagged (want 2) among the events:\n%v", geom, flagged, r.w.Events)
	}
}
