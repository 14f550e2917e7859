package main

import (
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/acq/store/storetest"
)

// loopFromCSV reads testdata/analyze/soft-si.csv (an analytic tanh loop,
// Bs 1.5 T, Hc 50 A/m) as a stored loop.
func loopFromCSV(t *testing.T, runID string) record.Loop {
	t.Helper()
	data, err := os.ReadFile("../../testdata/analyze/soft-si.csv")
	if err != nil {
		t.Fatal(err)
	}
	var lines []string
	for _, l := range strings.Split(string(data), "\n") {
		if l != "" && !strings.HasPrefix(l, "#") {
			lines = append(lines, l)
		}
	}
	recs, err := csv.NewReader(strings.NewReader(strings.Join(lines, "\n"))).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	l := record.Loop{RunID: runID, N: 1, Kind: "loop", Amplitude: 1000, AmpUnit: "A/m"}
	for _, r := range recs[1:] {
		ts, _ := strconv.ParseFloat(r[0], 64)
		h, _ := strconv.ParseFloat(r[1], 64)
		b, _ := strconv.ParseFloat(r[2], 64)
		T := time.Duration(ts * float64(time.Second))
		l.Raw = append(l.Raw, record.Sample{T: T, Phase: record.Sweep, I: h / 1000})
		l.Points = append(l.Points, record.Point{T: T, H: h, B: b, J: b - 1.25663706212e-6*h})
	}
	return l
}

// TestExportCommand: `hystd export --format csv` of a stored loop is read by
// `hystd analyze`, which gives the same figures as for the original file
// (testdata/analyze/soft-si.json); bad requests exit non-zero and write no
// file.
func TestExportCommand(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	st, err := store.Open(ctx, filepath.Join(dir, "hystd.db"))
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := st.CreateRun(ctx, storetest.SampleRun("run-x", t0)); err != nil {
		t.Fatal(err)
	}
	if err := st.AddLoop(ctx, loopFromCSV(t, "run-x")); err != nil {
		t.Fatal(err)
	}
	st.Close()

	run := func(args ...string) (string, error) {
		root := newRoot()
		var out bytes.Buffer
		root.SetOut(&out)
		root.SetErr(&bytes.Buffer{})
		root.SetArgs(args)
		err := root.Execute()
		return out.String(), err
	}
	csvFile := filepath.Join(dir, "loop.csv")
	if _, err := run("export", "--data", dir, "--format", "csv", "-o", csvFile, "run-x"); err != nil {
		t.Fatal(err)
	}
	got, err := run("analyze", csvFile, "--json")
	if err != nil {
		t.Fatal(err)
	}
	want, err := os.ReadFile("../../testdata/analyze/soft-si.json")
	if err != nil {
		t.Fatal(err)
	}
	if got != string(want) {
		t.Fatalf("analyze of the export:\n%s\nwant (analyze of the original):\n%s", got, want)
	}
	for _, f := range []string{"json", "lp", "svg", "png"} {
		out := filepath.Join(dir, "x."+f)
		if _, err := run("export", "--data", dir, "--format", f, "-o", out, "run-x"); err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		if fi, err := os.Stat(out); err != nil || fi.Size() == 0 {
			t.Fatalf("%s: %v", f, err)
		}
	}

	for _, tc := range []struct {
		args []string
		code int
		msg  string
	}{
		{[]string{"--format", "xlsx", "run-x"}, 2, `unknown format "xlsx"`},
		{[]string{"--loop", "-2", "run-x"}, 2, "numbered from 1"},
		{[]string{"nope"}, 3, "run nope: not found"},
		{[]string{"--loop", "4", "run-x"}, 3, "loop 4 of run run-x: not found"},
	} {
		bad := filepath.Join(dir, "bad.out")
		_, err := run(append([]string{"export", "--data", dir, "-o", bad}, tc.args...)...)
		var ee *exitError
		if !errors.As(err, &ee) || ee.code != tc.code || !strings.Contains(err.Error(), tc.msg) {
			t.Errorf("%v: %v, want exit %d with %q", tc.args, err, tc.code, tc.msg)
		}
		if _, err := os.Stat(bad); !os.IsNotExist(err) {
			t.Errorf("%v: output file written on failure", tc.args)
		}
	}
	if _, err := run("export", "--data", filepath.Join(dir, "none"), "run-x"); err == nil || !strings.Contains(err.Error(), "no store at") {
		t.Errorf("missing store: %v", err)
	}
	if _, err := os.Stat(filepath.Join(dir, "none")); !os.IsNotExist(err) {
		t.Error("export created a data folder")
	}
}
