package export_test

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"flag"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"hystd/acq/export"
	"hystd/acq/influx"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/acq/store/storetest"
	"hystd/calib/loopcsv"
)

var update = flag.Bool("update", false, "rewrite golden files")

var t0 = time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)

func fixture(t *testing.T, nRaw int) *store.Store {
	t.Helper()
	ctx := context.Background()
	st, err := store.Open(ctx, filepath.Join(t.TempDir(), "hystd.db"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	if err := st.CreateRun(ctx, storetest.SampleRun("run-1", t0)); err != nil {
		t.Fatal(err)
	}
	for n := 1; n <= 2; n++ {
		if err := st.AddLoop(ctx, storetest.SampleLoop("run-1", n, nRaw, t0.Add(time.Duration(n)*time.Minute))); err != nil {
			t.Fatal(err)
		}
	}
	if err := st.AddEvent(ctx, record.Event{RunID: "run-1", At: t0, Level: "info", Text: "demagnetized"}); err != nil {
		t.Fatal(err)
	}
	return st
}

func golden(t *testing.T, name string, got []byte) {
	t.Helper()
	p := filepath.Join("testdata", name)
	if *update {
		if err := os.WriteFile(p, got, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, want) {
		t.Fatalf("%s differs from the golden file (go test -update to accept)", p)
	}
}

// TestCSV: read back with encoding/csv (RFC 4180 reader of the standard
// library), every number parses to exactly the stored float64 and every
// missing channel is an empty cell; by default one row per corrected point,
// with AllSamples one per raw sample.
func TestCSV(t *testing.T) {
	st := fixture(t, 20)
	want := storetest.SampleLoop("run-1", 1, 20, t0.Add(time.Minute))
	for _, tc := range []struct {
		all    bool
		golden string
		rows   int
	}{{false, "run-1-loop-1.csv", len(want.Points)}, {true, "run-1-loop-1-all.csv", len(want.Raw)}} {
		var buf bytes.Buffer
		if err := export.Write(context.Background(), &buf, st, "run-1", export.CSV, export.Options{Loop: 1, AllSamples: tc.all}); err != nil {
			t.Fatal(err)
		}
		golden(t, tc.golden, buf.Bytes())
		recs, err := csv.NewReader(bytes.NewReader(buf.Bytes())).ReadAll()
		if err != nil {
			t.Fatal(err)
		}
		if strings.Join(recs[0], ",") != strings.Join(export.CSVHeader, ",") {
			t.Fatalf("header %v", recs[0])
		}
		if len(recs)-1 != tc.rows {
			t.Fatalf("all=%v: %d rows, want %d", tc.all, len(recs)-1, tc.rows)
		}
		col := map[string]int{}
		for i, h := range recs[0] {
			col[h] = i
		}
		parse := func(s string) float64 {
			if s == "" {
				return math.NaN()
			}
			v, err := strconv.ParseFloat(s, 64)
			if err != nil {
				t.Fatal(err)
			}
			return v
		}
		same := func(a, b float64) bool { return a == b || math.IsNaN(a) && math.IsNaN(b) }
		pi, row := 0, 1
		for i, s := range want.Raw {
			if s.Phase != record.Sweep && !tc.all {
				continue
			}
			rec := recs[row]
			row++
			if !same(parse(rec[col["psi"]]), s.Psi) || !same(parse(rec[col["B_probe"]]), s.BProbe) || !same(parse(rec[col["I"]]), s.I) {
				t.Fatalf("sample %d: %v, want %+v", i, rec, s)
			}
			if s.Phase == record.Sweep {
				p := want.Points[pi]
				pi++
				if parse(rec[col["H"]]) != p.H || parse(rec[col["B"]]) != p.B || rec[col["branch"]] != strconv.Itoa(p.Branch) {
					t.Fatalf("sample %d: %v, want point %+v", i, rec, p)
				}
			} else if rec[col["H"]] != "" {
				t.Fatalf("sample %d: hold sample has H %q", i, rec[col["H"]])
			}
		}
	}
}

// TestCSVReadsIntoAnalyze: the default CSV is what the loop-CSV reader of
// `hystd analyze` takes, with H and B exactly as stored.
func TestCSVReadsIntoAnalyze(t *testing.T) {
	st := fixture(t, 200)
	var buf bytes.Buffer
	if err := export.Write(context.Background(), &buf, st, "run-1", export.CSV, export.Options{Loop: 2}); err != nil {
		t.Fatal(err)
	}
	d, err := loopcsv.Read(&buf, "run-1.csv", loopcsv.Options{})
	if err != nil {
		t.Fatal(err)
	}
	want := storetest.SampleLoop("run-1", 2, 200, t0)
	if len(d.H) != len(want.Points) {
		t.Fatalf("%d points read, want %d", len(d.H), len(want.Points))
	}
	for i, p := range want.Points {
		if d.H[i] != p.H || d.B[i] != p.B || d.T[i] != p.T.Seconds() {
			t.Fatalf("point %d: read %g %g %g, stored %+v", i, d.T[i], d.H[i], d.B[i], p)
		}
	}
}

func TestJSON(t *testing.T) {
	st := fixture(t, 20)
	var buf bytes.Buffer
	if err := export.Write(context.Background(), &buf, st, "run-1", export.JSON, export.Options{}); err != nil {
		t.Fatal(err)
	}
	golden(t, "run-1.json", buf.Bytes())
	var d struct {
		Run struct {
			ID      string `json:"id"`
			Started string `json:"started"`
			Ended   *string
		} `json:"run"`
		Loops []struct {
			N       int `json:"n"`
			Figures []struct {
				Name  string   `json:"name"`
				Value float64  `json:"value"`
				U     *float64 `json:"u_k2"`
			} `json:"figures"`
			Raw []struct {
				BProbe *float64 `json:"b_probe_t"`
				Psi    float64  `json:"psi_wb"`
			} `json:"raw"`
		} `json:"loops"`
		Events []struct{ Text string } `json:"events"`
	}
	if err := json.Unmarshal(buf.Bytes(), &d); err != nil {
		t.Fatal(err)
	}
	want := storetest.SampleLoop("run-1", 2, 20, t0)
	if d.Run.ID != "run-1" || d.Run.Started != "2026-03-14T09:00:00Z" || d.Run.Ended != nil || len(d.Loops) != 2 || len(d.Events) != 1 {
		t.Fatalf("document %+v", d)
	}
	l := d.Loops[1]
	if l.N != 2 || l.Figures[0].Value != want.Figures[0].Value || l.Figures[1].U != nil || l.Raw[0].BProbe != nil || l.Raw[1].BProbe == nil ||
		l.Raw[5].Psi != want.Raw[5].Psi {
		t.Fatalf("loop 2: %+v", l)
	}
}

func TestLineProtocolIsTheForwardersPoints(t *testing.T) {
	st := fixture(t, 50)
	var buf bytes.Buffer
	if err := export.Write(context.Background(), &buf, st, "run-1", export.LP, export.Options{}); err != nil {
		t.Fatal(err)
	}
	var want bytes.Buffer
	r, _ := st.Run(context.Background(), "run-1")
	for n := 1; n <= 2; n++ {
		l, _ := st.Loop(context.Background(), "run-1", n)
		if _, err := influx.WriteLineProtocol(&want, r, l); err != nil {
			t.Fatal(err)
		}
	}
	if buf.String() != want.String() || buf.Len() == 0 {
		t.Fatal("lp export differs from the forwarder's points")
	}
}

func TestPlots(t *testing.T) {
	st := fixture(t, 400)
	var svg bytes.Buffer
	if err := export.Write(context.Background(), &svg, st, "run-1", export.SVG, export.Options{}); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(svg.String(), "<svg") || strings.Count(svg.String(), `class="trace"`) != 2 {
		t.Fatalf("svg: %d bytes, %d traces", svg.Len(), strings.Count(svg.String(), `class="trace"`))
	}
	var pb bytes.Buffer
	if err := export.Write(context.Background(), &pb, st, "run-1", export.PNG, export.Options{Loop: 2}); err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(&pb) // the standard library's PNG decoder
	if err != nil {
		t.Fatal(err)
	}
	if b := img.Bounds(); b.Dx() != 800 || b.Dy() != 560 {
		t.Fatalf("png %v", b)
	}
}

func TestBadRequests(t *testing.T) {
	st := fixture(t, 10)
	ctx := context.Background()
	tests := []struct {
		name   string
		run    string
		f      export.Format
		loop   int
		notFnd bool
		want   string
	}{
		{"unknown run", "nope", export.CSV, 0, true, "nope"},
		{"unknown loop", "run-1", export.CSV, 9, true, "loop 9"},
		{"negative loop", "run-1", export.CSV, -1, false, "numbered from 1"},
		{"bad format", "run-1", "xlsx", 0, false, `unknown format "xlsx"`},
	}
	for _, tc := range tests {
		var buf bytes.Buffer
		err := export.Write(ctx, &buf, st, tc.run, tc.f, export.Options{Loop: tc.loop})
		if err == nil || !strings.Contains(err.Error(), tc.want) || errors.Is(err, record.ErrNotFound) != tc.notFnd {
			t.Errorf("%s: %v", tc.name, err)
		}
		if buf.Len() != 0 {
			t.Errorf("%s: wrote %d bytes before failing", tc.name, buf.Len())
		}
	}
	if _, err := export.ParseFormat("PNG"); err != nil {
		t.Error(err)
	}
}
