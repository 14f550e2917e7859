package daemon

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"hystd/acq/engine/enginetest"
	"hystd/acq/record"
	"hystd/acq/store/memstore"
)

// TestDaemonImport: a recording imported through the daemon (what POST
// /api/v1/imports calls) is stored on the config's fixture; a bad one is a
// client error and stores nothing.
func TestDaemonImport(t *testing.T) {
	p := writeConfig(t, "kind: daemon\nstore: {path: x.db}\n"+fixtures)
	cfg, err := Load(p)
	if err != nil {
		t.Fatal(err)
	}
	w := enginetest.NewWriter()
	d, err := New(cfg, Deps{Open: (&fakeBench{}).open, Writer: w, Clock: enginetest.NewClock(), Log: slog.New(slog.DiscardHandler), Software: "test"})
	if err != nil {
		t.Fatal(err)
	}
	sp := filepath.Join(filepath.Dir(p), "specimen-ring-r17.yaml")
	_, _, err = d.Import(context.Background(), "aldermoor-ring-2", sp, "bad.csv", []byte("t,I,psi\n0,0,x\n"))
	var br interface{ BadRequest() bool }
	if err == nil || !strings.Contains(err.Error(), "bad.csv:2: column psi:") || !errors.As(err, &br) {
		t.Fatalf("bad file: %v", err)
	}
	if _, _, err := d.Import(context.Background(), "no-such", sp, "a.csv", nil); err == nil {
		t.Error("unknown fixture accepted")
	}
	if len(w.RunList()) != 0 {
		t.Fatal("refused imports stored a run")
	}
	// A tanh loop (B = 1.5 T·tanh((H ± 100 A/m)/50 A/m)) on the sample ring
	// (N1 200, l = π·45 mm, N2·A = 100·50 mm²), holds at I = 0.
	var b strings.Builder
	b.WriteString("t,I,psi\n")
	l := math.Pi * 0.045
	k := 0
	row := func(h, dir float64) {
		tt := float64(k) * 0.01
		k++
		fmt.Fprintf(&b, "%g,%g,%g\n", tt, h*l/200, 100*50e-6*1.5*math.Tanh((h+dir*100)/50)+1e-5*tt)
	}
	for range 50 {
		row(0, 1)
	}
	for _, s := range [][3]float64{{0, -1000, 1}, {-1000, 1000, -1}, {1000, -1000, 1}, {-1000, 0, -1}} {
		for j := 1; j <= 300; j++ {
			row(s[0]+(s[1]-s[0])*float64(j)/300, s[2])
		}
	}
	for range 50 {
		row(0, -1)
	}
	run, loops, err := d.Import(context.Background(), "aldermoor-ring-2", sp, "ring.csv", []byte(b.String()))
	if err != nil {
		t.Fatal(err)
	}
	if len(loops) != 1 || run.Fixture != "aldermoor-ring-2" || run.Specimen != "R17-003" || len(w.RunList()) != 1 || w.LoopCount() != 1 {
		t.Errorf("run %+v, %d loops; writer %d runs, %d loops", run, len(loops), len(w.RunList()), w.LoopCount())
	}
}

// TestDaemonReprocess: what POST /api/v1/runs/{id}/reprocess calls. An
// imported run is re-processed with its specimen at twice the ring height
// (twice the area: B halves, H stays) and stored as revision 2 by the
// caller named; a body that is no specimen or fixture is a client error.
func TestDaemonReprocess(t *testing.T) {
	p := writeConfig(t, "kind: daemon\nstore: {path: x.db}\n"+fixtures)
	cfg, err := Load(p)
	if err != nil {
		t.Fatal(err)
	}
	st := memstore.New(nil)
	d, err := New(cfg, Deps{Open: (&fakeBench{}).open, Writer: st, Clock: enginetest.NewClock(), Log: slog.New(slog.DiscardHandler), Software: "test"})
	if err != nil {
		t.Fatal(err)
	}
	sp := filepath.Join(filepath.Dir(p), "specimen-ring-r17.yaml")
	// The tanh loop of TestDaemonImport on the sample ring.
	var b strings.Builder
	b.WriteString("t,I,psi\n")
	l := math.Pi * 0.045
	k := 0
	row := func(h, dir float64) {
		tt := float64(k) * 0.01
		k++
		fmt.Fprintf(&b, "%g,%g,%g\n", tt, h*l/200, 100*50e-6*1.5*math.Tanh((h+dir*100)/50)+1e-5*tt)
	}
	for range 50 {
		row(0, 1)
	}
	for _, s := range [][3]float64{{0, -1000, 1}, {-1000, 1000, -1}, {1000, -1000, 1}, {-1000, 0, -1}} {
		for j := 1; j <= 300; j++ {
			row(s[0]+(s[1]-s[0])*float64(j)/300, s[2])
		}
	}
	for range 50 {
		row(0, -1)
	}
	ctx := context.Background()
	run, loops, err := d.Import(ctx, "aldermoor-ring-2", sp, "ring.csv", []byte(b.String()))
	if err != nil {
		t.Fatal(err)
	}
	var br interface{ BadRequest() bool }
	if _, _, err := d.Reprocess(ctx, run.ID, []byte("kind: recipe\nname: x\n"), "alba"); err == nil || !errors.As(err, &br) {
		t.Fatalf("recipe body: %v", err)
	}
	spec, err := os.ReadFile(sp)
	if err != nil {
		t.Fatal(err)
	}
	var h float64
	for _, line := range strings.Split(string(spec), "\n") {
		if f := strings.Fields(line); len(f) >= 2 && f[0] == "height_mm:" {
			h, _ = strconv.ParseFloat(f[1], 64)
		}
	}
	if h == 0 {
		t.Fatalf("no height_mm in %s", sp)
	}
	body := strings.Replace(string(spec), fmt.Sprintf("height_mm: %g", h), fmt.Sprintf("height_mm: %g", 2*h), 1)
	v, l2, err := d.Reprocess(ctx, run.ID, []byte(body), "alba")
	if err != nil {
		t.Fatal(err)
	}
	if v.N != 2 || v.By != "alba" || !strings.Contains(v.Change, "height_mm") || len(l2) != 1 {
		t.Fatalf("revision %+v", v)
	}
	get := func(ls []record.Loop, n string) float64 {
		for _, f := range ls[0].Figures {
			if f.Name == n {
				return f.Value
			}
		}
		return math.NaN()
	}
	if get(l2, "Br") != get(loops, "Br")/2 || get(l2, "HcB") != get(loops, "HcB") {
		t.Errorf("Br %v → %v, HcB %v → %v", get(loops, "Br"), get(l2, "Br"), get(loops, "HcB"), get(l2, "HcB"))
	}
	if revs, _ := st.Revisions(ctx, run.ID); len(revs) != 2 {
		t.Errorf("%d revisions stored", len(revs))
	}
}
