package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"hystd/acq/config/configtest"
	"hystd/acq/imports/importstest"
)

// TestImportCommand imports a small raw recording built from the exact
// tanh loop of acq/imports' tests (here: a coarse one, 400 samples per Hm,
// so only its shape and keys are checked, the figures' accuracy being
// acq/imports' test) and a bad file, which must leave no store behind.
func TestImportCommand(t *testing.T) {
	dir := t.TempDir()
	csv := filepath.Join(dir, "old.csv")
	if err := os.WriteFile(csv, []byte(importstest.CoarseTanh()), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := runCLI("import", csv, "--fixture", "../../acq/imports/testdata/fixture-import.yaml",
		"--specimen", "../../acq/imports/testdata/specimen-direct.yaml", "--data", filepath.Join(dir, "d"), "--json")
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal([]byte(strings.TrimSpace(out)), &m); err != nil {
		t.Fatalf("%v: %q", err, out)
	}
	for _, k := range []string{"hmax_a_m", "bmax_t", "br_t", "hcb_a_m", "hcj_a_m", "mu_a", "loss_j_m3", "bhmax_j_m3"} {
		if _, ok := m[k]; !ok {
			t.Errorf("key %s missing from %s", k, out)
		}
	}
	if h, _ := m["hcb_a_m"].(float64); h < 99 || h > 101 {
		t.Errorf("hcb_a_m %v, want about 100", m["hcb_a_m"])
	}
	runs, err := runCLI("runs", "--data", filepath.Join(dir, "d"), "--json")
	if err != nil || !strings.Contains(runs, `"recipe": "import"`) {
		t.Errorf("runs: %v\n%s", err, runs)
	}

	bad := filepath.Join(dir, "bad.csv")
	if err := os.WriteFile(bad, []byte("t,I (mA),psi\n0,0,0\n1,zero,0\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err = runCLI("import", bad, "--fixture", "../../acq/imports/testdata/fixture-import.yaml",
		"--specimen", "../../acq/imports/testdata/specimen-direct.yaml", "--data", filepath.Join(dir, "e"))
	if err == nil || !strings.Contains(err.Error(), "bad.csv:3: column I:") {
		t.Fatalf("bad file: %v", err)
	}
	if _, err := os.Stat(filepath.Join(dir, "e", "hystd.db")); err == nil {
		t.Error("a bad file created a store")
	}
}

// TestCheckCalibration: `hystd check` knows kind: calibration.
func TestCheckCalibration(t *testing.T) {
	if _, err := runCLI("check", "../../acq/calrec/testdata/integrator-ok.yaml"); err != nil {
		t.Errorf("good record: %v", err)
	}
	out, errs, code := runCmd(t, "check", "../../acq/calrec/testdata/bad-gain.yaml")
	if code == 0 || !strings.Contains(out+errs, "bad-gain.yaml:10: integrator.gain.value: must be > 0") {
		t.Errorf("bad record: exit %d, %s%s", code, out, errs)
	}
}

// TestImportWithConfig: with --config the fixture is named from the daemon
// config and the run goes into the config's store.
func TestImportWithConfig(t *testing.T) {
	dir := t.TempDir()
	configtest.WriteRing(t, dir)
	cfg := filepath.Join(dir, "d.yaml")
	body := "kind: daemon\nstore: {path: " + filepath.Join(dir, "s.db") + "}\nfixtures:\n  - {fixture: fixture-ring-bench.yaml, specimen: specimen-ring-r17.yaml}\n"
	if err := os.WriteFile(cfg, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	csv := filepath.Join(dir, "old.csv")
	if err := os.WriteFile(csv, []byte(importstest.CoarseTanh()), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := runCLI("import", csv, "--config", cfg, "--fixture", "aldermoor-ring-2", "--specimen", filepath.Join(dir, "specimen-ring-r17.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out, "imported from old.csv (sha256 ") || !strings.Contains(out, "HcB") {
		t.Errorf("output:\n%s", out)
	}
	runs, err := runCLI("runs", "--config", cfg, "--json")
	if err != nil || !strings.Contains(runs, `"fixture": "aldermoor-ring-2"`) {
		t.Errorf("runs: %v\n%s", err, runs)
	}
}
