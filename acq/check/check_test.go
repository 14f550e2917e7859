package check_test

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	_ "hystd/acq/calrec" // registers kind calibration
	"hystd/acq/check"
	_ "hystd/acq/recipe" // registers kind recipe
)

// TestEverySampleConfigValidates loads every YAML file shipped in configs/
// through the loader of its kind.
func TestEverySampleConfigValidates(t *testing.T) {
	var files []string
	err := filepath.WalkDir("../../configs", func(p string, d os.DirEntry, err error) error {
		if err == nil && !d.IsDir() && strings.HasSuffix(p, ".yaml") {
			files = append(files, p)
		}
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	if len(files) < 5 {
		t.Fatalf("found only %d sample configs", len(files))
	}
	for _, f := range files {
		t.Run(filepath.ToSlash(strings.TrimPrefix(f, "../../")), func(t *testing.T) {
			data, err := os.ReadFile(f)
			if err != nil {
				t.Fatal(err)
			}
			if strings.Contains(string(data), "\nkind: daemon") {
				t.Skip("daemon configs are validated by acq/daemon's tests")
			}
			if err := check.Bytes(f, data); err != nil {
				t.Error(err)
			}
		})
	}
}

// TestRejects covers the four rejections the check command must name by
// file and key, one edit of a valid sample each.
func TestRejects(t *testing.T) {
	read := func(name string) string {
		b, err := os.ReadFile(filepath.Join("../../configs", name))
		if err != nil {
			t.Fatal(err)
		}
		return string(b)
	}
	fixture, specimen := read("fixture-ring-bench.yaml"), read("specimen-ring-r17.yaml")
	cases := []struct {
		name, text, from, to, want string
	}{
		{"misspelled key", fixture, "  max_voltage_v: 30", "  max_voltag_v: 30",
			`f.yaml:%d: limits.max_voltag_v: unknown key (did you mean "max_voltage_v"?)`},
		{"current the supply cannot reach", fixture, "  max_current_a: 10", "  max_current_a: 25",
			"f.yaml:%d: limits.max_current_a: 25 A is beyond what supply profile sim-supply can set (-20 A to 20 A)"},
		{"negative dimension", specimen, "  outer_diameter_mm: 50", "  outer_diameter_mm: -50",
			"f.yaml:%d: ring.outer_diameter_mm: must be a positive number, got -50"},
		{"duration without unit", fixture, "  comm_timeout: 2s", "  comm_timeout: 2",
			`f.yaml:%d: limits.comm_timeout: duration "2" has no unit`},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			bad := strings.Replace(tc.text, tc.from, tc.to, 1)
			if bad == tc.text {
				t.Fatalf("edit %q not applied", tc.from)
			}
			err := check.Bytes("f.yaml", []byte(bad))
			if err == nil {
				t.Fatal("accepted")
			}
			want := fmt.Sprintf(tc.want, lineOf(bad, tc.to))
			if !strings.Contains(err.Error(), want) {
				t.Errorf("got\n%v\nwant a line containing\n%s", err, want)
			}
		})
	}
}

func TestUnknownKind(t *testing.T) {
	err := check.Bytes("x.yaml", []byte("kind: gadget\nname: x\n"))
	if err == nil || !strings.Contains(err.Error(), `x.yaml:1: kind: unknown kind "gadget"`) {
		t.Errorf("got %v", err)
	}
}

// lineOf returns the 1-based line on which sub starts in text.
func lineOf(text, sub string) int {
	i := strings.Index(text, sub)
	if i < 0 {
		return 0
	}
	return strings.Count(text[:i], "\n") + 1
}

// TestWarnings: a valid file can still look wrong. An Epstein strip length
// of 305 m (for 0.305 m) is outside the 0.28–0.32 m the 0.94 m path length
// of IEC 60404-2 assumes: a warning at the key, no error.
func TestWarnings(t *testing.T) {
	tests := []struct {
		file string
		want []string
	}{
		{"testdata/specimen-epstein-305m.yaml", []string{"testdata/specimen-epstein-305m.yaml:12: epstein.strip_length_m: warning: strip length 305.000 m is outside 0.28–0.32 m"}},
		{"testdata/specimen-epstein-ok.yaml", nil},
		{"../../configs/specimen-ring-r17.yaml", nil},
		// A demag_curve needs a centred symmetric loop before it reaching its
		// saturate field: the absolute B of the curve is read at that loop's
		// top tip (see acq/process/run.go).
		{"testdata/recipe-demag-no-loop.yaml", []string{"testdata/recipe-demag-no-loop.yaml:12: steps.0.demag_curve.saturate: warning: no record_loop before this step saturates the specimen (at least 1.2 MA/m)"}},
		{"testdata/recipe-demag-small-loop.yaml", []string{"testdata/recipe-demag-small-loop.yaml:17: steps.1.demag_curve.saturate: warning: no record_loop before this step reaches 1.2 MA/m (the largest is 300 kA/m)"}},
		{"../../configs/recipes/magnet-demag-curve.yaml", nil},
		{"../../configs/recipes/ring-normal-curve.yaml", nil},
	}
	for _, tc := range tests {
		ws, err := check.Report(tc.file)
		if err != nil {
			t.Errorf("%s: %v", tc.file, err)
			continue
		}
		if len(ws) != len(tc.want) {
			t.Errorf("%s: warnings %v, want %d", tc.file, ws, len(tc.want))
			continue
		}
		for i, w := range tc.want {
			if !strings.HasPrefix(ws[i].Error(), w) {
				t.Errorf("%s: warning %q, want it to start %q", tc.file, ws[i], w)
			}
		}
	}
}
