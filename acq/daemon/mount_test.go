package daemon

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/api"
	"hystd/acq/engine/enginetest"
	"hystd/acq/record"
)

// registryConfig writes a daemon config with a specimens folder of three
// rings (ids S-1, S-2, S-3, S-3 of another grade) and a grades folder.
func registryConfig(t *testing.T, extra string) string {
	t.Helper()
	p := writeConfig(t, "kind: daemon\nstore: {path: x.db}\nspecimens: specimens\ngrades: grades\n"+extra+fixtures)
	dir := filepath.Dir(p)
	spec, err := os.ReadFile(filepath.Join(dir, "specimen-ring-r17.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	for _, d := range []string{"specimens", "grades"} {
		if err := os.Mkdir(filepath.Join(dir, d), 0o755); err != nil {
			t.Fatal(err)
		}
	}
	for i, id := range []string{"S-1", "S-2", "S-3"} {
		txt := strings.Replace(string(spec), "id: R17-003", "id: "+id, 1)
		txt = strings.Replace(txt, "height_mm: 10", "height_mm: "+[]string{"10", "8", "12"}[i], 1)
		if err := os.WriteFile(filepath.Join(dir, "specimens", id+".yaml"), []byte(txt), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	for _, g := range []string{"grade-no-r470.yaml"} {
		b, err := os.ReadFile(filepath.Join("../../configs", g))
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dir, "grades", g), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	return p
}

// TestBatchOfSpecimens: three runs queued on three specimens of the
// registry (by id, by the recipe's specimen: key, by file) are each stored
// with their own specimen and grade; with confirm_mount each waits until its
// specimen is confirmed mounted, and an unknown specimen is refused.
func TestBatchOfSpecimens(t *testing.T) {
	for _, confirm := range []bool{false, true} {
		extra := ""
		if confirm {
			extra = "confirm_mount: true\n"
		}
		path := registryConfig(t, extra)
		cfg, err := Load(path)
		if err != nil {
			t.Fatal(err)
		}
		if got := cfg.Registry.IDs(); strings.Join(got, ",") != "S-1,S-2,S-3" {
			t.Fatalf("registry %v", got)
		}
		clk := &schedClock{enginetest.NewClock()}
		fb := &fakeBench{clk: clk, sup: enginetest.NewSupply(clk.Clock)}
		w := enginetest.NewWriter()
		d, err := New(cfg, Deps{Open: fb.open, Writer: w, Clock: clk, Log: slog.New(slog.DiscardHandler), Software: "test"})
		if err != nil {
			t.Fatal(err)
		}
		d.Start(context.Background())
		ends := make(chan ending, 3)
		done := func(r record.Run, err error) { ends <- ending{r, err} }
		ctx := context.Background()
		id1, err := d.SubmitForNamed(ctx, "", "S-1", "a.yaml", []byte(quickLoop), "test", done)
		if err != nil {
			t.Fatal(err)
		}
		withKey := strings.Replace(quickLoop, "name: quick\n", "name: quick\nspecimen: S-2\n", 1)
		id2, err := d.SubmitForNamed(ctx, "", "", "b.yaml", []byte(withKey), "test", done)
		if err != nil {
			t.Fatal(err)
		}
		id3, err := d.SubmitForNamed(ctx, "", filepath.Join(filepath.Dir(path), "specimens", "S-3.yaml"), "c.yaml", []byte(quickLoop), "test", done)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := d.SubmitFor(ctx, "", "S-9", []byte(quickLoop)); !errors.Is(err, ErrUnknownSpecimen) || !strings.Contains(err.Error(), "S-1 S-2 S-3") {
			t.Errorf("unknown specimen: %v", err)
		}
		for _, id := range []string{id1, id2, id3} {
			if confirm {
				waitFor(t, "run waiting for its mount", 5*time.Second, func() bool { ws := d.Waiting(); return len(ws) == 1 && ws[0].RunID == id })
				if ws := d.Waiting(); ws[0].Mounted == ws[0].Specimen {
					t.Errorf("waiting %+v", ws)
				}
				if err := d.ConfirmMount(ctx, "nope"); !errors.Is(err, ErrNotWaiting) {
					t.Errorf("confirm unknown: %v", err)
				}
				if err := d.ConfirmMount(api.WithUser(ctx, api.User{Name: "mira", Role: api.RoleOperate}), id); err != nil {
					t.Fatal(err)
				}
			}
			e := <-ends
			if e.err != nil || e.run.ID != id || e.run.State != record.Finished {
				t.Fatalf("ending %+v", e)
			}
		}
		d.Stop("test over")
		for i, id := range []string{id1, id2, id3} {
			r := w.Run(id)
			want := []string{"S-1", "S-2", "S-3"}[i]
			if r.Specimen != want || r.Grade != "NO-R470" || !strings.Contains(r.Config, "id: "+want) {
				t.Errorf("run %s stored with specimen %q grade %q", id, r.Specimen, r.Grade)
			}
		}
		if confirm {
			n := 0
			for _, e := range w.Events {
				if strings.Contains(e.Text, "confirmed mounted") {
					n++
				}
			}
			if n != 3 {
				t.Errorf("%d mount confirmations recorded, want 3", n)
			}
			for i, id := range []string{id1, id2, id3} {
				want := fmt.Sprintf("user mira (operate): specimen S-%d mount confirmed", i+1)
				if !hasText(w.EventsOf(id), "info", want) {
					t.Errorf("run %s: no event %q", id, want)
				}
			}
		}
	}
}
