package daemon

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"hystd/acq/engine/enginetest"
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
