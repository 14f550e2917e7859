package daemon

import (
	"bytes"
	"context"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"hystd/acq/record"
)

// TestRunOnceOnAChosenSpecimen is `hystd run --specimen ID` on the bench:
// the run is stored with the chosen specimen of the registry, judged
// against its grade, and the terminal shows figures and verdicts at the end.
func TestRunOnceOnAChosenSpecimen(t *testing.T) {
	bd := benchFiles(t, nil)
	for _, d := range []string{"specimens", "grades"} {
		if err := os.Mkdir(filepath.Join(bd.dir, d), 0o755); err != nil {
			t.Fatal(err)
		}
	}
	sp, err := os.ReadFile(filepath.Join(bd.dir, "specimen.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	gr, err := os.ReadFile("../../configs/grade-no-r470.yaml")
	if err != nil {
		t.Fatal(err)
	}
	cfg, err := os.ReadFile(filepath.Join(bd.dir, "daemon.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	for name, data := range map[string][]byte{
		"specimens/r17-009.yaml": bytes.Replace(sp, []byte("id: R17-003"), []byte("id: R17-009"), 1),
		"grades/no-r470.yaml":    gr,
		"daemon.yaml":            append([]byte("specimens: specimens\ngrades: grades\n"), cfg...),
		"loop.yaml":              []byte(strings.Replace(shortLoop, "500 A/m", "1 kA/m", 1)),
	} {
		if err := os.WriteFile(filepath.Join(bd.dir, name), data, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	out := &syncBuf{}
	o := RunOptions{ConfigPath: filepath.Join(bd.dir, "daemon.yaml"), RecipePath: filepath.Join(bd.dir, "loop.yaml"), Out: out,
		Specimen: "R17-009", Operator: "bay-2 night shift", Wiring: Wiring{Software: "test", Stderr: bd.logs, Signals: make(chan os.Signal), Clock: bd.clock}}
	run, err := RunOnce(context.Background(), o)
	if err != nil || run.State != record.Finished {
		t.Fatalf("run %s %q: %v\n%s", run.State, run.Reason, err, out)
	}
	bd.assertZero(t)
	r, loops := bd.run(t, run.ID)
	if r.Specimen != "R17-009" || r.Grade != "NO-R470" || r.Operator != "bay-2 night shift" || len(loops) != 1 {
		t.Fatalf("stored run %s: specimen %q grade %q operator %q, %d loops", r.ID, r.Specimen, r.Grade, r.Operator, len(loops))
	}
	// The grade's limits apply to loops whose measured Hmax is within 5 % of
	// 1 kA/m; the bench runs in simulated time, so the sweep reaches it at
	// any load.
	hmax := math.NaN()
	for _, f := range loops[0].Figures {
		if f.Name == "Hmax" {
			hmax = f.Value
		}
	}
	if !(math.Abs(hmax-1000) <= 50) || len(loops[0].Verdicts) != 3 {
		t.Fatalf("Hmax %g A/m: %d verdicts, want 1 kA/m ± 5 %% and 3", hmax, len(loops[0].Verdicts))
	}
	want := []string{"specimen R17-009", "HcB",
		"loop 1 against grade NO-R470 (rule guarded-U): " + strings.ToUpper(string(record.Worst(loops[0].Verdicts)))}
	text := out.String()
	for _, want := range want {
		if !strings.Contains(text, want) {
			t.Errorf("terminal output lacks %q:\n%s", want, text)
		}
	}
	// An unknown specimen is refused before any instrument is touched.
	o.Specimen, o.Out = "R17-999", &syncBuf{}
	if _, err := RunOnce(context.Background(), o); err == nil || !strings.Contains(err.Error(), "R17-999") || !strings.Contains(err.Error(), "R17-009") {
		t.Errorf("unknown specimen: %v", err)
	}
}
