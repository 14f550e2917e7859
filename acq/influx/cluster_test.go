package influx_test

import (
	"context"
	"math"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/influx"
	"hystd/acq/influx/vmtest"
	"hystd/acq/outbox"
)

// clusterPath is the write path of a VictoriaMetrics cluster's vminsert for
// tenant 42 (its documentation: /insert/<accountID>/influx/api/v2/write).
// The single-node server started here serves the same path with
// -http.pathPrefix, so the test shows that the path in the URL is kept in
// front of /api/v2/write; tenant isolation itself is the cluster's and is
// not tested.
const clusterPath = "/insert/42/influx"

// TestVMClusterPathTags: static tags on every point through a URL path. A
// typo in the path is refused with HTTP 400, the loops are quarantined with
// the server's reason; requeued after the fix, every value arrives once.
func TestVMClusterPathTags(t *testing.T) {
	srv := vmtest.Start(t, "-http.pathPrefix="+clusterPath)
	if !strings.HasSuffix(srv.URL, clusterPath) {
		t.Fatalf("server URL %s lacks the path %s", srv.URL, clusterPath)
	}
	st := openStore(t, filepath.Join(t.TempDir(), "hystd.db"))
	r, loops := demoRun(t, st, "cluster-1", t0, 2, 500)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	tags := map[string]string{"site": "north-lab", "bay": "bay-2"}

	wrong := vmConfig(strings.Replace(srv.URL, "/insert/", "/insrt/", 1))
	wrong.Tags = tags
	if n, err := influx.DeliverAll(ctx, st, wrong); err != nil || n != 0 {
		t.Fatalf("wrong path: %d points, %v; want none and no error (quarantined)", n, err)
	}
	q, err := outbox.List(ctx, st)
	if err != nil || len(q) != len(loops) {
		t.Fatalf("wrong path: %d quarantined (%v), want %d", len(q), err, len(loops))
	}
	if !strings.Contains(q[0].LastError, "HTTP 400") || !strings.Contains(q[0].LastError, "pathPrefix") {
		t.Errorf("quarantine reason %q does not carry the server's message", q[0].LastError)
	}
	if _, err := outbox.Requeue(ctx, st, "cluster-1"); err != nil {
		t.Fatal(err)
	}

	cfg := vmConfig(srv.URL)
	cfg.Tags = tags
	n, err := influx.DeliverAll(ctx, st, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if b, _ := st.Backlog(ctx); b.Pending != 0 || b.Quarantined != 0 {
		t.Fatalf("backlog after the requeued delivery: %+v", b)
	}
	t.Logf("%d points through %s", n, srv.URL)
	want := map[string]float64{}
	for _, l := range loops {
		pts, err := influx.Encoding{Tags: tags}.Points(r, l)
		if err != nil {
			t.Fatal(err)
		}
		for _, p := range pts {
			labels := map[string]string{}
			for _, tg := range p.TagList() {
				labels[tg.Key] = tg.Value
			}
			for k, v := range tags {
				if labels[k] != v {
					t.Fatalf("point %s lacks tag %s=%s", p.Name(), k, v)
				}
			}
			for _, f := range p.FieldList() {
				want[vmtest.Key(p.Name()+"_"+f.Key, labels, p.Time().UnixMilli())] = f.Value.(float64)
			}
		}
	}
	checkOnce(t, srv, []string{"cluster-1"}, want)

	// Independently of the encoder: the stored currents, by count and sum,
	// in the series of site north-lab.
	series, err := srv.Export(ctx, `hyst_sample_I{run="cluster-1",site="north-lab",bay="bay-2"}`)
	if err != nil {
		t.Fatal(err)
	}
	gotN, gotSum := 0, 0.0
	for _, s := range series {
		for _, v := range s.Values {
			gotN++
			gotSum += v
		}
	}
	wantN, wantSum := 0, 0.0
	for _, lh := range loops {
		l, err := st.Loop(ctx, r.ID, lh.N)
		if err != nil {
			t.Fatal(err)
		}
		for _, s := range l.Raw {
			if !math.IsNaN(s.I) {
				wantN++
				wantSum += s.I
			}
		}
	}
	if gotN != wantN || math.Abs(gotSum-wantSum) > 1e-9*math.Max(1, math.Abs(wantSum)) {
		t.Errorf("hyst_sample_I of site north-lab: %d values, sum %g; the store has %d, sum %g", gotN, gotSum, wantN, wantSum)
	}
}
