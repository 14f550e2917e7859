package sim

import (
	"errors"
	"flag"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"hystd/configs"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata/bad")

// TestSampleBenches loads every bench file shipped in configs/ and the
// embedded default.
func TestSampleBenches(t *testing.T) {
	files, _ := filepath.Glob("../../configs/bench-*.yaml")
	if len(files) < 3 {
		t.Fatalf("bench samples: %v", files)
	}
	for _, f := range files {
		c, err := LoadBench(f)
		if err != nil {
			t.Errorf("%s: %v", f, err)
			continue
		}
		if len(c.Profiles()) != 4 {
			t.Errorf("%s: profiles %v, want all four roles", f, c.Profiles())
		}
	}
	c, err := DefaultBench()
	if err != nil {
		t.Fatal(err)
	}
	// The demo bench matches configs/fixture-ring-bench.yaml and
	// configs/specimen-ring-r17.yaml.
	if c.Winding.N1 != 200 || c.Winding.N2 != 100 || c.Winding.ResistanceOhm != 0.8 || c.Winding.InductanceH != 0.05 {
		t.Errorf("winding %+v does not match the demo fixture", c.Winding)
	}
	if r := c.Specimen.Geometry.Ring; r == nil || r.OuterDiameterMM != 50 || r.InnerDiameterMM != 40 || r.HeightMM != 10 {
		t.Errorf("ring %+v does not match specimen R17-003", r)
	}
	if c.Faults != nil {
		t.Error("the demo bench must inject no faults")
	}
}

// TestBadBenches: each file in testdata/bad is refused with the error in
// its .err golden file (FILE:LINE: key: problem).
func TestBadBenches(t *testing.T) {
	files, _ := filepath.Glob("testdata/bad/*.yaml")
	if len(files) == 0 {
		t.Fatal("no bad benches")
	}
	for _, f := range files {
		_, err := LoadBench(f)
		if err == nil {
			t.Errorf("%s: accepted", f)
			continue
		}
		var ce *configs.Error
		if !errors.As(err, &ce) || ce.Line == 0 {
			t.Errorf("%s: error without a line: %v", f, err)
		}
		golden := strings.TrimSuffix(f, ".yaml") + ".err"
		if *update {
			os.WriteFile(golden, []byte(err.Error()+"\n"), 0o644)
			continue
		}
		want, rerr := os.ReadFile(golden)
		if rerr != nil {
			t.Fatalf("%s: %v (run with -update)", f, rerr)
		}
		if got := err.Error() + "\n"; got != string(want) {
			t.Errorf("%s:\n got %s want %s", f, got, want)
		}
	}
}

func TestStartRefusesUnloadedConfig(t *testing.T) {
	if _, err := Start(t.Context(), Config{}); err == nil {
		t.Error("a zero Config was started")
	}
}
