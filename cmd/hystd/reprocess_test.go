package main

import (
	"encoding/csv"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// v4Store copies the real schema-4 store file (acq/store/testdata/v4.db,
// two imports of an exact tanh loop on a 50 mm² direct specimen; see
// v4-source/README.md) into a temporary folder, with the magnet specimen
// HX-002 at twice the area beside it. It returns the folder, the run of
// HX-002 and the doubled specimen's file.
func v4Store(t *testing.T) (dir, run, doubled string) {
	t.Helper()
	dir = t.TempDir()
	src, err := os.ReadFile("../../acq/store/testdata/v4.db")
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "hystd.db"), src, 0o600); err != nil {
		t.Fatal(err)
	}
	sp, err := os.ReadFile("../../acq/store/testdata/v4-source/specimen-magnet.yaml")
	if err != nil {
		t.Fatal(err)
	}
	doubled = filepath.Join(dir, "HX-002-corrected.yaml")
	if err := os.WriteFile(doubled, []byte(strings.Replace(string(sp), "area_mm2: 50", "area_mm2: 100", 1)), 0o600); err != nil {
		t.Fatal(err)
	}
	out, err := runCLI("runs", "--data", dir, "--specimen", "HX-002", "--json")
	if err != nil {
		t.Fatal(err)
	}
	var rows []runRow
	if err := json.Unmarshal([]byte(out), &rows); err != nil || len(rows) != 1 || rows[0].Revision != 1 {
		t.Fatalf("runs of HX-002 in v4.db: %s (%v)", out, err)
	}
	return dir, rows[0].ID, doubled
}

// exportCSV returns the B and H columns of a revision's CSV export.
func exportCSV(t *testing.T, dir, run, rev string) (h, b []float64) {
	t.Helper()
	args := []string{"export", run, "--data", dir}
	if rev != "" {
		args = append(args, "--revision", rev)
	}
	out, err := runCLI(args...)
	if err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(strings.NewReader(out)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range rows[1:] {
		hv, err1 := strconv.ParseFloat(r[11], 64)
		bv, err2 := strconv.ParseFloat(r[12], 64)
		if err := errors.Join(err1, err2); err != nil {
			t.Fatal(err)
		}
		h, b = append(h, hv), append(b, bv)
	}
	return h, b
}

// TestReprocessCommand is the acceptance case on the command line: with a
// specimen of twice the cross-section, B = ψ/(N2·A) halves, exactly (a
// factor of 2 is exact in binary floating point and the processing is
// linear in B), and so do Br, Bmax, the loss ∮H dB and (BH)max = max(−B·H);
// H = N1·I/l_m and the H-figures (HcB) do not change. Both revisions stay
// readable: runs, export --revision 1/2 (CSV and JSON).
func TestReprocessCommand(t *testing.T) {
	dir, run, doubled := v4Store(t)
	h1, b1 := exportCSV(t, dir, run, "")
	out, err := runCLI("reprocess", run, "--data", dir, "--specimen", doubled, "--by", "alba", "--json")
	if err != nil {
		t.Fatal(err)
	}
	var rep reprocessJSON
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatalf("%v\n%s", err, out)
	}
	if rep.Revision != 2 || rep.By != "alba" || len(rep.Change) != 1 || rep.Change[0] != "specimen.direct.area_mm2: 50 → 100" || len(rep.Loops) != 1 {
		t.Fatalf("reprocess --json: %s", out)
	}
	// The run list shows the latest revision and who made it.
	out, err = runCLI("runs", "--data", dir, "--specimen", "HX-002", "--json")
	if err != nil {
		t.Fatal(err)
	}
	var rows []runRow
	if err := json.Unmarshal([]byte(out), &rows); err != nil || len(rows) != 1 || rows[0].Revision != 2 ||
		len(rows[0].Revisions) != 2 || rows[0].Revisions[0].By != "bay 3" || rows[0].Revisions[1].By != "alba" {
		t.Fatalf("runs after reprocess: %s (%v)", out, err)
	}
	if out, err := runCLI("runs", "--data", dir); err != nil || !strings.Contains(out, "2 (by alba)") {
		t.Errorf("runs table: %v\n%s", err, out)
	}
	// CSV of both revisions: the same H, B halved, row by row.
	for _, rev := range []string{"1", "2", ""} {
		h, b := exportCSV(t, dir, run, rev)
		if len(h) != len(h1) || len(h) == 0 {
			t.Fatalf("revision %q: %d rows, revision 1 had %d", rev, len(h), len(h1))
		}
		for i := range h {
			want := b1[i]
			if rev != "1" {
				want = b1[i] / 2
			}
			if h[i] != h1[i] || b[i] != want {
				t.Fatalf("revision %q row %d: H %v B %v, want H %v B %v", rev, i, h[i], b[i], h1[i], want)
			}
		}
	}
	// JSON of both revisions: the figures that scale with B halve.
	figs := func(rev string) (map[string]float64, int, int) {
		out, err := runCLI("export", run, "--data", dir, "--format", "json", "--revision", rev)
		if err != nil {
			t.Fatal(err)
		}
		var d struct {
			Run struct {
				Revision  int               `json:"revision"`
				Revisions []json.RawMessage `json:"revisions"`
			} `json:"run"`
			Loops []struct {
				Figures []struct {
					Name  string  `json:"name"`
					Value float64 `json:"value"`
				} `json:"figures"`
			} `json:"loops"`
		}
		if err := json.Unmarshal([]byte(out), &d); err != nil {
			t.Fatal(err)
		}
		m := map[string]float64{}
		for _, f := range d.Loops[0].Figures {
			m[f.Name] = f.Value
		}
		return m, d.Run.Revision, len(d.Run.Revisions)
	}
	f1, r1, n1 := figs("1")
	f2, r2, n2 := figs("2")
	if r1 != 1 || r2 != 2 || n1 != 2 || n2 != 2 {
		t.Fatalf("JSON revisions: %d/%d of %d/%d", r1, r2, n1, n2)
	}
	for _, name := range []string{"Br", "Bmax", "loss_j_m3", "BHmax"} {
		if f2[name] != f1[name]/2 || f1[name] == 0 {
			t.Errorf("%s: revision 2 %v, want half of revision 1's %v", name, f2[name], f1[name])
		}
	}
	if f2["HcB"] != f1["HcB"] || f2["Hmax"] != f1["Hmax"] {
		t.Errorf("H-figures changed: HcB %v → %v, Hmax %v → %v", f1["HcB"], f2["HcB"], f1["Hmax"], f2["Hmax"])
	}
	// Nothing changed, an unknown run and a revision that does not exist
	// are refused.
	if _, err := runCLI("reprocess", run, "--data", dir, "--specimen", doubled, "--by", "alba"); err == nil || !strings.Contains(err.Error(), "nothing changed") {
		t.Errorf("same specimen again: %v", err)
	}
	var ee *exitError
	if _, err := runCLI("reprocess", "ghost", "--data", dir, "--specimen", doubled); !errors.As(err, &ee) || ee.code != exitNotFound {
		t.Errorf("unknown run: %v", err)
	}
	if _, err := runCLI("export", run, "--data", dir, "--revision", "3"); !errors.As(err, &ee) || ee.code != exitNotFound {
		t.Errorf("revision 3: %v", err)
	}
	if _, err := runCLI("reprocess", run, "--data", dir); !errors.As(err, &ee) || ee.code != exitUsage {
		t.Errorf("no change given: %v", err)
	}
}
