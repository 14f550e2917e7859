package main

import (
	"bytes"
	"strings"
	"testing"
)

// TestCheckCommandWarns: `hystd check` prints a warning for the 305 m
// Epstein strip (see acq/check's TestWarnings) and exits 0; an error still
// makes it fail.
func TestCheckCommandWarns(t *testing.T) {
	root := newRoot()
	var out, errOut bytes.Buffer
	root.SetOut(&out)
	root.SetErr(&errOut)
	root.SetArgs([]string{"check", "../../acq/check/testdata/specimen-epstein-305m.yaml", "../../configs/specimen-ring-r17.yaml"})
	if err := root.Execute(); err != nil {
		t.Fatalf("exit with an error on warnings only: %v\n%s", err, errOut.String())
	}
	for _, w := range []string{
		"specimen-epstein-305m.yaml:12: epstein.strip_length_m: warning: strip length 305.000 m is outside 0.28–0.32 m",
		"specimen-epstein-305m.yaml: ok, 1 warning(s)",
		"specimen-ring-r17.yaml: ok\n",
	} {
		if !strings.Contains(out.String(), w) {
			t.Errorf("output lacks %q:\n%s", w, out.String())
		}
	}
	root = newRoot()
	root.SetOut(&bytes.Buffer{})
	root.SetErr(&bytes.Buffer{})
	root.SetArgs([]string{"check", "../../acq/check/testdata/specimen-epstein-305m.yaml", "../../acq/check/testdata/nope.yaml"})
	if err := root.Execute(); err == nil {
		t.Error("a missing file passed")
	}
}
