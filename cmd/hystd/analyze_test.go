package main

import (
	"bytes"
	"os"
	"strings"
	"testing"
)

// TestAnalyzeCommand runs `hystd analyze` on the CSVs of testdata/analyze
// (generated from analytic loops by calib/loopcsv's tests) and compares
// with the golden outputs there; the loop in Oe and G gives the SI output.
func TestAnalyzeCommand(t *testing.T) {
	for _, tc := range []struct {
		args   []string
		golden string
	}{
		{[]string{"analyze", "../../testdata/analyze/soft-si.csv", "--json"}, "soft-si.json"},
		{[]string{"analyze", "../../testdata/analyze/soft-cgs.csv", "--json", "--h-unit", "Oe", "--b-unit", "G"}, "soft-si.json"},
		{[]string{"analyze", "../../testdata/analyze/magnet-si.csv"}, "magnet-si.txt"},
	} {
		root := newRoot()
		var out bytes.Buffer
		root.SetOut(&out)
		root.SetArgs(tc.args)
		if err := root.Execute(); err != nil {
			t.Fatalf("%v: %v", tc.args, err)
		}
		want, err := os.ReadFile("../../testdata/analyze/" + tc.golden)
		if err != nil {
			t.Fatal(err)
		}
		if out.String() != string(want) {
			t.Errorf("%v:\n%s\nwant:\n%s", tc.args, out.String(), want)
		}
	}
	root := newRoot()
	root.SetOut(&bytes.Buffer{})
	root.SetArgs([]string{"analyze", "../../testdata/analyze/bad-missing.csv"})
	if err := root.Execute(); err == nil || !strings.Contains(err.Error(), `bad-missing.csv:1: header has no column "B"`) {
		t.Errorf("bad CSV: %v", err)
	}
}
