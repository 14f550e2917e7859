package main

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"hystd/acq/config/configtest"
	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/acq/store/storetest"
)

// storeJudgedLoop stores run-x with the soft loop and a failing verdict.
func storeJudgedLoop(t *testing.T, dir string) {
	t.Helper()
	ctx := context.Background()
	st, err := store.Open(ctx, filepath.Join(dir, "hystd.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := st.CreateRun(ctx, storetest.SampleRun("run-x", t0)); err != nil {
		t.Fatal(err)
	}
	l := loopFromCSV(t, "run-x")
	l.Verdicts = []record.Verdict{{Grade: "TAPE-50", Figure: "HcB", Value: 50, U: 1, Min: 0, Max: 40, Unit: "A/m", Rule: "guarded-U", Outcome: record.Fail}}
	if err := st.AddLoop(ctx, l); err != nil {
		t.Fatal(err)
	}
}

// daemonConfigFor writes a daemon config whose store.path is db.
func daemonConfigFor(t *testing.T, db string) string {
	t.Helper()
	dir := t.TempDir()
	configtest.WriteRing(t, dir)
	p := filepath.Join(dir, "d.yaml")
	body := "kind: daemon\nstore: {path: " + db + "}\nfixtures:\n  - {fixture: fixture-ring-bench.yaml, specimen: specimen-ring-r17.yaml}\n"
	if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestRunsCommand: `hystd runs` lists a stored run with its recipe,
// specimen, grade and verdict, from --data or from a daemon config's store.
func TestRunsCommand(t *testing.T) {
	dir := t.TempDir()
	storeJudgedLoop(t, dir)
	cfg := daemonConfigFor(t, filepath.Join(dir, "hystd.db"))
	for _, args := range [][]string{{"runs", "--data", dir}, {"runs", "--config", cfg}, {"runs", "--data", dir, "--specimen", "R-17", "--recipe", "ring-loop-1k"}} {
		out, err := runCLI(args...)
		if err != nil {
			t.Fatalf("%v: %v", args, err)
		}
		if f := strings.Fields(strings.Split(out, "\n")[1]); len(f) < 8 || f[2] != "run-x" || f[3] != "ring-loop-1k" || f[4] != "R-17" || f[5] != "TAPE-50" || f[6] != "finished" && f[6] != "queued" || f[8] != "fail" {
			t.Errorf("%v:\n%s", args, out)
		}
	}
	if out, err := runCLI("runs", "--data", dir, "--specimen", "nobody"); err != nil || !strings.Contains(out, "no runs match") {
		t.Errorf("filtered out: %q %v", out, err)
	}
	if _, err := runCLI("runs", "--data", filepath.Join(dir, "missing")); err == nil || !strings.Contains(err.Error(), "no store at") {
		t.Errorf("missing store: %v", err)
	}
}

// TestOutputFileModes: files written by export and report are created with
// 0666 less the umask, like any other tool's output: 0644 under umask 022,
// 0600 under 077.
func TestOutputFileModes(t *testing.T) {
	dir := t.TempDir()
	storeJudgedLoop(t, dir)
	cfg := daemonConfigFor(t, filepath.Join(dir, "hystd.db"))
	old := syscall.Umask(0o022)
	defer syscall.Umask(old)
	for _, tc := range []struct {
		umask int
		want  os.FileMode
	}{{0o022, 0o644}, {0o077, 0o600}, {0o002, 0o664}} {
		syscall.Umask(tc.umask)
		for i, args := range [][]string{
			{"export", "run-x", "--data", dir, "--format", "csv", "-o"},
			{"export", "run-x", "--config", cfg, "--format", "json", "-o"},
			{"report", "run-x", "--data", dir, "-o"},
		} {
			out := filepath.Join(dir, "out-"+string(rune('a'+i)))
			os.Remove(out)
			if _, err := runCLI(append(args, out)...); err != nil {
				t.Fatalf("%v: %v", args, err)
			}
			fi, err := os.Stat(out)
			if err != nil {
				t.Fatal(err)
			}
			if fi.Mode().Perm() != tc.want {
				t.Errorf("umask %03o, %v: mode %v, want %v", tc.umask, args, fi.Mode().Perm(), tc.want)
			}
		}
	}
}
