package reprocess_test

import (
	"context"
	"math"
	"strings"
	"testing"

	"hystd/acq/calrec"
	"hystd/acq/record"
	"hystd/acq/reprocess"
	"hystd/configs"
)

// calRecord parses a calibration record for the bench's integrator.
func calRecord(t *testing.T, id, cert, date, due string) calrec.Record {
	t.Helper()
	text := "kind: calibration\nid: " + id + "\napplies_to: {role: integrator, identity: \"HYSTD-SIM,FLUX-INTEGRATOR,7\"}\n" +
		"certificate: " + cert + "\ndate: " + date + "\ndue: " + due + "\nintegrator:\n  gain: {value: 1.01, u: 0.002}\n"
	doc, err := configs.Parse("cal/"+id+".yaml", []byte(text))
	if err != nil {
		t.Fatal(err)
	}
	r, err := calrec.FromDoc(doc)
	if err != nil {
		t.Fatal(err)
	}
	return r
}

// TestLiveRunCalibrationRecords: a live run whose events name the record
// it used (as calrec.Use words them) is re-processed only with that record
// as recorded: missing from the records given, or with another
// certificate, date or due date under its id, it is refused naming the
// record and nothing is stored; as recorded, it is applied — Bmax is
// revision 1's (processed without it: liveRun) divided by its gain 1.01
// and by 2 for twice the area (to rounding: the factor 1.01 is not exact in
// binary) — and the revision's events name it.
func TestLiveRunCalibrationRecords(t *testing.T) {
	ctx := context.Background()
	rec := calRecord(t, "CAL-9", "CERT-9", "2025-02-01", "2027-02-01")
	for _, c := range []struct {
		name string
		recs []calrec.Record
		dir  string
		want string // in the error; "" when it is re-processed
	}{
		{"no folder", nil, "", "but no calibrations folder was given"},
		{"missing", []calrec.Record{calRecord(t, "CAL-8", "CERT-9", "2025-02-01", "2027-02-01")}, "/lab/cal", "the calibrations folder /lab/cal does not hold"},
		{"certificate", []calrec.Record{calRecord(t, "CAL-9", "CERT-9b", "2025-02-01", "2027-02-01")}, "/lab/cal", "cal/CAL-9.yaml now holds calibration CAL-9 (integrator HYSTD-SIM,FLUX-INTEGRATOR,7; certificate CERT-9b"},
		{"date", []calrec.Record{calRecord(t, "CAL-9", "CERT-9", "2025-02-02", "2027-02-01")}, "/lab/cal", "2025-02-02, due 2027-02-01"},
		{"due", []calrec.Record{calRecord(t, "CAL-9", "CERT-9", "2025-02-01", "2028-02-01")}, "/lab/cal", "due 2028-02-01"},
		{"as recorded", []calrec.Record{rec}, "/lab/cal", ""},
	} {
		t.Run(c.name, func(t *testing.T) {
			st, run, _ := liveRun(t)
			used := record.Event{RunID: run.ID, At: now, Level: "info", Text: "used " + rec.Describe()}
			if err := st.AddEvent(ctx, used); err != nil {
				t.Fatal(err)
			}
			before, _ := st.Events(ctx, run.ID)
			res, err := reprocess.Run(ctx, st, reprocess.Options{RunID: run.ID, Specimen: doubled(t, "specimen-direct.yaml"),
				By: "alba", Now: now, Calibrations: c.recs, CalibrationsDir: c.dir})
			if c.want != "" {
				if err == nil || !strings.Contains(err.Error(), "run live-1 used calibration CAL-9 (") || !strings.Contains(err.Error(), c.want) {
					t.Fatalf("error %v, want one naming CAL-9 and %q", err, c.want)
				}
				t.Logf("refused: %v", err)
				if revs, _ := st.Revisions(ctx, run.ID); len(revs) != 1 {
					t.Errorf("%d revisions after a refusal", len(revs))
				}
				if after, _ := st.Events(ctx, run.ID); len(after) != len(before) {
					t.Errorf("%d events after a refusal, were %d", len(after), len(before))
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if !strings.Contains(strings.Join(eventTexts(res.Events), "\n"), "revision 2: "+used.Text) {
				t.Errorf("revision 2's events do not name the record: %q", eventTexts(res.Events))
			}
			l1, _ := st.LoopOf(ctx, run.ID, 1, 1)
			l2, _ := st.LoopOf(ctx, run.ID, 1, 2)
			var b1, b2 float64
			for _, f := range l1.Figures {
				if f.Name == "Bmax" {
					b1 = f.Value
				}
			}
			for _, f := range l2.Figures {
				if f.Name == "Bmax" {
					b2 = f.Value
				}
			}
			if want := b1 / 1.01 / 2; b1 == 0 || math.Abs(b2-want) > 1e-12*want {
				t.Errorf("Bmax %.15g, want revision 1's %.15g / 1.01 / 2 = %.15g", b2, b1, want)
			}
		})
	}
}
