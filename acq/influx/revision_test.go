package influx_test

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"hystd/acq/config"
	"hystd/acq/influx"
	"hystd/acq/influx/influxv1test"
	"hystd/acq/influx/vmtest"
	"hystd/acq/record"
	"hystd/acq/reprocess"
	"hystd/acq/store"
)

// reprocessedV4 opens a copy of the real schema-4 store file (two imported
// runs, see acq/store/testdata/v4-source/README.md) and returns it with the
// run of specimen HX-001.
func reprocessedV4(t *testing.T) (*store.Store, record.Run) {
	t.Helper()
	src, err := os.ReadFile("../store/testdata/v4.db")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "hystd.db")
	if err := os.WriteFile(path, src, 0o600); err != nil {
		t.Fatal(err)
	}
	st := openStore(t, path)
	runs, err := st.Runs(context.Background(), record.RunFilter{Specimen: "HX-001"})
	if err != nil || len(runs) != 1 {
		t.Fatalf("%v %v", runs, err)
	}
	return st, runs[0]
}

// reprocessTwiceArea stores revision 2 of run with twice the specimen area.
func reprocessTwiceArea(t *testing.T, st *store.Store, run record.Run) {
	t.Helper()
	sp, err := config.LoadSpecimen("../store/testdata/v4-source/specimen-direct.yaml")
	if err != nil {
		t.Fatal(err)
	}
	sp.Direct.AreaMM2 *= 2
	if _, err := reprocess.Run(context.Background(), st, reprocess.Options{RunID: run.ID, Specimen: &sp, By: "alba", Now: time.Now()}); err != nil {
		t.Fatal(err)
	}
}

// TestVMRevisions: a re-processed run reaches VictoriaMetrics as new series
// tagged revision=2 beside the revision-1 series already sent (which carry
// no revision tag, as before re-processing existed), and nothing is
// deleted or overwritten: every value of both revisions reads back exactly
// once, and revision 2's B is half of revision 1's at every sample.
func TestVMRevisions(t *testing.T) {
	srv := vmtest.Start(t)
	st, run := reprocessedV4(t)
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	cfg := vmConfig(srv.URL)
	if _, err := influx.DeliverAll(ctx, st, cfg); err != nil {
		t.Fatal(err)
	}
	l1, err := st.LoopOf(ctx, run.ID, 1, 1)
	if err != nil {
		t.Fatal(err)
	}
	want := expected(t, run, []record.Loop{l1})
	checkOnce(t, srv, []string{run.ID}, want)

	reprocessTwiceArea(t, st, run)
	n, err := influx.DeliverAll(ctx, st, cfg)
	if err != nil || n == 0 {
		t.Fatalf("revision 2: %d points (%v)", n, err)
	}
	l2, err := st.LoopOf(ctx, run.ID, 1, 2)
	if err != nil {
		t.Fatal(err)
	}
	revs, err := st.Revisions(ctx, run.ID)
	if err != nil {
		t.Fatal(err)
	}
	w2 := expected(t, run.At(revs[1]), []record.Loop{l2})
	tagged := 0
	for k, v := range w2 {
		if strings.Contains(k, "revision=2") {
			tagged++
		}
		want[k] = v
	}
	if tagged != len(w2) {
		t.Fatalf("%d of %d revision-2 values tagged revision=2", tagged, len(w2))
	}
	checkOnce(t, srv, []string{run.ID}, want)
	// B of revision 2 is half of revision 1's, sample by sample.
	halves := 0
	for k, v := range w2 {
		if !strings.HasPrefix(k, "hyst_sample_B{") {
			continue
		}
		k1 := strings.Replace(k, ",revision=2", "", 1)
		if b1, ok := want[k1]; !ok || v != b1/2 {
			t.Fatalf("%s = %v; revision 1 %v (%v)", k, v, b1, ok)
		}
		halves++
	}
	if halves != len(l2.Points) {
		t.Fatalf("%d B samples compared, %d points", halves, len(l2.Points))
	}
}

// TestInfluxV1Revisions: the same on InfluxDB 1.x, read back with InfluxQL:
// the revision-1 points have no revision tag ("revision" = ”), the
// revision-2 points have revision = '2', both are there in full, and B of
// revision 2 is half of revision 1's at every sample time.
func TestInfluxV1Revisions(t *testing.T) {
	srv := influxv1test.Start(t, "hystd")
	st, run := reprocessedV4(t)
	tok := filepath.Join(t.TempDir(), "token")
	if err := os.WriteFile(tok, []byte(influxv1test.User+":"+influxv1test.Password+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	cfg := vmConfig(srv.URL)
	cfg.API, cfg.Bucket, cfg.TokenFile = influx.APIv1, "hystd/autogen", tok
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	if _, err := influx.DeliverAll(ctx, st, cfg); err != nil {
		t.Fatal(err)
	}
	reprocessTwiceArea(t, st, run)
	if _, err := influx.DeliverAll(ctx, st, cfg); err != nil {
		t.Fatal(err)
	}
	l1, err := st.LoopOf(ctx, run.ID, 1, 1)
	if err != nil {
		t.Fatal(err)
	}
	byT := func(rev string) map[string]string {
		rows := queryRows(t, ctx, srv, "hystd", fmt.Sprintf(`SELECT "B", "t" FROM "hyst_sample" WHERE "run" = '%s' AND "revision" = '%s' AND "B" > -100`, run.ID, rev))
		m := map[string]string{}
		for _, r := range rows {
			m[num(r["t"])] = num(r["B"])
		}
		return m
	}
	b1, b2 := byT(""), byT("2")
	if len(b1) != len(l1.Points) || len(b2) != len(l1.Points) {
		t.Fatalf("%d revision-1 and %d revision-2 B values, want %d each", len(b1), len(b2), len(l1.Points))
	}
	for ts, s1 := range b1 {
		v1, err1 := strconv.ParseFloat(s1, 64)
		v2, err2 := strconv.ParseFloat(b2[ts], 64)
		if err1 != nil || err2 != nil || v2 != v1/2 {
			t.Fatalf("t = %s: B revision 1 %q, revision 2 %q", ts, s1, b2[ts])
		}
	}
	for _, rev := range []string{"", "2"} {
		rows := queryRows(t, ctx, srv, "hystd", fmt.Sprintf(`SELECT "Br" FROM "hyst_figure" WHERE "run" = '%s' AND "revision" = '%s'`, run.ID, rev))
		if len(rows) != 1 {
			t.Fatalf("revision %q: %d figure points", rev, len(rows))
		}
	}
}
