package influx_test

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"hystd/acq/influx"
	"hystd/acq/influx/influxv1test"
	"hystd/acq/record"
	"hystd/acq/store"
)

// TestInfluxV1 writes a stored run through the v1 endpoint (/write?db=&rp=
// &precision=ns, HTTP basic authentication) to a real InfluxDB 1.x (Debian's
// influxdb package, started by the test with authentication on), reads it
// back with InfluxQL and compares every value with the store, the record of
// truth. Static tags must be on every point, the run's software on the
// figure point.
func TestInfluxV1(t *testing.T) {
	srv := influxv1test.Start(t, "hystd")
	st := openStore(t, filepath.Join(t.TempDir(), "hystd.db"))
	// Recorded two hours ago, so that the README's time windows hold it.
	demoRun(t, st, "v1-run-1", time.Now().Add(-2*time.Hour), 2, 1500)
	tok := filepath.Join(t.TempDir(), "token")
	if err := os.WriteFile(tok, []byte(influxv1test.User+":"+influxv1test.Password+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	cfg := vmConfig(srv.URL)
	cfg.API, cfg.Bucket, cfg.TokenFile = influx.APIv1, "hystd/autogen", tok
	cfg.Tags = map[string]string{"site": "north-lab", "bay": "bay 2"}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	n, err := influx.DeliverAll(ctx, st, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if b, _ := st.Backlog(ctx); b.Pending != 0 || b.Quarantined != 0 {
		q, _ := st.Quarantined(ctx, 0)
		t.Fatalf("backlog after delivery: %+v %+v", b, q)
	}
	t.Logf("%d points acknowledged by InfluxDB 1.x", n)
	compareWithStore(t, ctx, srv, "hystd", st, "v1-run-1", cfg.Tags)

	// README.md's InfluxQL examples answer on this server.
	fix := strings.NewReplacer("aldermoor-ring-2-20261201T230230Z-1ec464", "v1-run-1", "R17-003", "R-17")
	for _, q := range readmeBlock(t, "sql", true) {
		q = fix.Replace(q)
		series, err := srv.Query(ctx, "hystd", q)
		if err != nil || len(series) == 0 || len(series[0].Values) == 0 {
			t.Errorf("README query %s: %v, %d series", q, err, len(series))
		}
	}

	// A wrong password is refused by the server (HTTP 401) and nothing is
	// marked delivered.
	st2 := openStore(t, filepath.Join(t.TempDir(), "hystd.db"))
	demoRun(t, st2, "v1-run-2", t0.Add(time.Hour), 1, 10)
	bad := filepath.Join(t.TempDir(), "bad-token")
	os.WriteFile(bad, []byte(influxv1test.User+":wrong"), 0o600)
	cfg.TokenFile = bad
	f, err := influx.New(cfg, st2, influx.Options{Log: quiet()})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	sctx, scancel := context.WithTimeout(ctx, 2*time.Second)
	defer scancel()
	if n, err := f.Drain(sctx); err == nil || n != 0 {
		t.Fatalf("wrong password: %d points, err %v; want none and an error", n, err)
	} else {
		t.Logf("wrong password: %v", err)
	}
}

// compareWithStore reads every sample and figure point of a run with InfluxQL
// and compares it with the stored loops.
func compareWithStore(t *testing.T, ctx context.Context, srv *influxv1test.Server, db string, st *store.Store, runID string, tags map[string]string) {
	t.Helper()
	r, err := st.Run(ctx, runID)
	if err != nil {
		t.Fatal(err)
	}
	loops, err := st.Loops(ctx, runID)
	if err != nil {
		t.Fatal(err)
	}
	for _, lh := range loops {
		l, err := st.Loop(ctx, runID, lh.N)
		if err != nil {
			t.Fatal(err)
		}
		rows := queryRows(t, ctx, srv, db, fmt.Sprintf(`SELECT * FROM "hyst_sample" WHERE "run" = '%s' AND "loop" = '%d'`, runID, l.N))
		// Expected: each stored raw sample with a finite value, with the
		// corrected point of the same time.
		pts := map[time.Duration]record.Point{}
		for _, p := range l.Points {
			pts[p.T] = p
		}
		want := 0
		byT := map[string]map[string]any{}
		for _, row := range rows {
			byT[num(row["t"])] = row
		}
		for _, s := range l.Raw {
			vals := map[string]float64{"I": s.I, "psi": s.Psi, "V": s.V, "setpoint": s.Setpoint, "b_probe": s.BProbe, "temp": s.TempC}
			if p, ok := pts[s.T]; ok {
				vals["H"], vals["B"], vals["J"] = p.H, p.B, p.J
			}
			finite := false
			for _, v := range vals {
				finite = finite || !math.IsNaN(v) && !math.IsInf(v, 0)
			}
			if !finite {
				continue
			}
			want++
			row, ok := byT[strconv.FormatFloat(s.T.Seconds(), 'f', -1, 64)]
			if !ok {
				t.Fatalf("loop %d: sample at %v not in InfluxDB", l.N, s.T)
			}
			for k, v := range vals {
				got, present := row[k]
				if math.IsNaN(v) || math.IsInf(v, 0) {
					if present && got != nil {
						t.Errorf("loop %d sample %v: %s = %v, stored NaN", l.N, s.T, k, got)
					}
					continue
				}
				if g := num(got); g != strconv.FormatFloat(v, 'f', -1, 64) && !sameFloat(g, v) {
					t.Errorf("loop %d sample %v: %s = %s, stored %v", l.N, s.T, k, g, v)
				}
			}
			for k, v := range tags {
				if row[k] != v {
					t.Errorf("loop %d sample %v: tag %s = %v, want %q", l.N, s.T, k, row[k], v)
				}
			}
		}
		if len(rows) != want {
			t.Errorf("loop %d: %d rows in InfluxDB, %d stored samples with values", l.N, len(rows), want)
		}
		figs := queryRows(t, ctx, srv, db, fmt.Sprintf(`SELECT * FROM "hyst_figure" WHERE "run" = '%s' AND "loop" = '%d'`, runID, l.N))
		if len(figs) != 1 {
			t.Fatalf("loop %d: %d figure points, want 1", l.N, len(figs))
		}
		fr := figs[0]
		for _, f := range l.Figures {
			if !sameFloat(num(fr[f.Name]), f.Value) {
				t.Errorf("loop %d: figure %s = %v, stored %v", l.N, f.Name, fr[f.Name], f.Value)
			}
			if !math.IsNaN(f.U) && !sameFloat(num(fr[f.Name+"_u"]), f.U) {
				t.Errorf("loop %d: figure %s_u = %v, stored %v", l.N, f.Name, fr[f.Name+"_u"], f.U)
			}
		}
		if fr["software"] != r.Software {
			t.Errorf("loop %d: figure point software tag %v, stored run's software %q", l.N, fr["software"], r.Software)
		}
		for k, v := range tags {
			if fr[k] != v {
				t.Errorf("loop %d figure: tag %s = %v, want %q", l.N, k, fr[k], v)
			}
		}
		t.Logf("loop %d: %d sample rows and the figure point match the store", l.N, len(rows))
	}
}

func queryRows(t *testing.T, ctx context.Context, srv *influxv1test.Server, db, q string) []map[string]any {
	t.Helper()
	series, err := srv.Query(ctx, db, q)
	if err != nil {
		t.Fatal(err)
	}
	var rows []map[string]any
	for _, s := range series {
		for _, v := range s.Values {
			row := map[string]any{}
			for k, val := range s.Tags {
				row[k] = val
			}
			for i, c := range s.Columns {
				if i < len(v) && v[i] != nil {
					row[c] = v[i]
				}
			}
			rows = append(rows, row)
		}
	}
	return rows
}

// num is a JSON number's text ("" for anything else).
func num(v any) string {
	if n, ok := v.(json.Number); ok {
		return n.String()
	}
	return ""
}

// sameFloat: the JSON text parses to exactly v (InfluxDB keeps float64
// fields bit for bit; its JSON prints the shortest round-trip form).
func sameFloat(s string, v float64) bool {
	g, err := strconv.ParseFloat(s, 64)
	return err == nil && g == v
}
