package main

import (
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"regexp"
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

// storeSoftLoop stores the soft-si loop as run-x in dir/hystd.db.
func storeSoftLoop(t *testing.T, dir string) {
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
	if err := st.AddLoop(ctx, loopFromCSV(t, "run-x")); err != nil {
		t.Fatal(err)
	}
}

func runCLI(args ...string) (string, error) {
	root := newRoot()
	var out bytes.Buffer
	root.SetOut(&out)
	root.SetErr(&bytes.Buffer{})
	root.SetArgs(args)
	err := root.Execute()
	return out.String(), err
}

// svgAxes reads the tick labels of an export's SVG plot and returns the
// maps from pixel to axis value, the axis titles and the trace vertices.
type svgAxes struct {
	x, y           func(px float64) float64
	xTitle, yTitle string
	pts            [][2]float64
}

var (
	xTickRE  = regexp.MustCompile(`<text x="([0-9.]+)" y="[0-9.]+" text-anchor="middle">([^<]+)</text>`)
	yTickRE  = regexp.MustCompile(`<text x="[0-9.]+" y="([0-9.]+)" text-anchor="end">([^<]+)</text>`)
	xTitleRE = regexp.MustCompile(`text-anchor="middle" font-size="13">([^<]+)</text>`)
	yTitleRE = regexp.MustCompile(`rotate\(-90\)" text-anchor="middle" font-size="13">([^<]+)</text>`)
	traceRE  = regexp.MustCompile(`<polyline class="trace"[^>]* points="([^"]+)"`)
)

func readAxes(t *testing.T, svg string) svgAxes {
	t.Helper()
	var shift float64
	lin := func(re *regexp.Regexp) func(float64) float64 {
		m := re.FindAllStringSubmatch(svg, -1)
		if len(m) < 2 {
			t.Fatalf("fewer than two ticks for %s", re)
		}
		num := func(i int) (px, v float64) {
			px, err1 := strconv.ParseFloat(m[i][1], 64)
			v, err2 := strconv.ParseFloat(strings.ReplaceAll(m[i][2], "−", "-"), 64)
			if err1 != nil || err2 != nil {
				t.Fatalf("tick %q", m[i][0])
			}
			return px, v
		}
		p0, v0 := num(0)
		p1, v1 := num(len(m) - 1)
		p0, p1 = p0-shift, p1-shift
		return func(px float64) float64 { return v0 + (px-p0)/(p1-p0)*(v1-v0) }
	}
	x := lin(xTickRE)
	shift = 4 // y tick labels sit 4 px below their tick (acq/plot/svg.go)
	a := svgAxes{x: x, y: lin(yTickRE)}
	if m := xTitleRE.FindStringSubmatch(svg); m != nil {
		a.xTitle = m[1]
	}
	if m := yTitleRE.FindStringSubmatch(svg); m != nil {
		a.yTitle = m[1]
	}
	for _, m := range traceRE.FindAllStringSubmatch(svg, -1) {
		for _, xy := range strings.Fields(m[1]) {
			var p [2]float64
			if _, err := fmt.Sscanf(xy, "%g,%g", &p[0], &p[1]); err != nil {
				t.Fatalf("vertex %q: %v", xy, err)
			}
			p[0], p[1] = a.x(p[0]), a.y(p[1])
			a.pts = append(a.pts, p)
		}
	}
	return a
}

// TestExportPlotStyle: --y, --units and --quadrant reach the drawing. The
// plotted extremes of the stored loop are checked against its own points
// converted with 1 Oe = 1000/(4π) A/m and 1 G = 1e-4 T (the CGS-EMU units,
// SI Brochure 8th ed., Table 9; from memory); bad values and plot flags on
// a non-plot format exit 2 naming the flag and write no file.
func TestExportPlotStyle(t *testing.T) {
	dir := t.TempDir()
	storeSoftLoop(t, dir)
	l := loopFromCSV(t, "run-x")
	hMax, bMax, jMax := math.Inf(-1), math.Inf(-1), math.Inf(-1)
	q2H, q2Y := math.Inf(-1), math.Inf(-1) // second quadrant: H ≤ 0, B ≥ 0
	for _, p := range l.Points {
		hMax, bMax, jMax = math.Max(hMax, p.H), math.Max(bMax, p.B), math.Max(jMax, p.J)
		if p.H <= 0 && p.B >= 0 {
			q2H, q2Y = math.Max(q2H, p.H), math.Max(q2Y, math.Max(p.B, p.J))
		}
	}
	oePerAm := 4 * math.Pi / 1000
	for _, tc := range []struct {
		name           string
		flags          []string
		xTitle, yTitle string
		hMax, yMax     float64 // in the axis units
		hTol, yTol     float64
		extra          string
	}{
		{"si B", nil, "H (A/m)", "B (T)", hMax, bMax, 1, 0.01, ""},
		{"cgs J", []string{"--y", "J", "--units", "cgs"}, "H (Oe)", "J (kG)", hMax * oePerAm, jMax * 1e4 / 1e3, 0.02, 0.05, ""},
		{"cgs B", []string{"--units", "cgs"}, "H (Oe)", "B (kG)", hMax * oePerAm, bMax * 10, 0.02, 0.05, ""},
		{"quadrant 2", []string{"--quadrant", "2"}, "H (A/m)", "B solid, J dashed (T)", q2H, q2Y, 1, 0.01, "(BH)max"},
	} {
		out, err := runCLI(append([]string{"export", "--data", dir, "--format", "svg", "run-x"}, tc.flags...)...)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		a := readAxes(t, out)
		if a.xTitle != tc.xTitle || a.yTitle != tc.yTitle {
			t.Errorf("%s: axes %q, %q; want %q, %q", tc.name, a.xTitle, a.yTitle, tc.xTitle, tc.yTitle)
		}
		gh, gy := math.Inf(-1), math.Inf(-1)
		for _, p := range a.pts {
			gh, gy = math.Max(gh, p[0]), math.Max(gy, p[1])
		}
		if math.Abs(gh-tc.hMax) > tc.hTol || math.Abs(gy-tc.yMax) > tc.yTol {
			t.Errorf("%s: plotted H max %.4g, y max %.4g; want %.4g ± %g, %.4g ± %g", tc.name, gh, gy, tc.hMax, tc.hTol, tc.yMax, tc.yTol)
		}
		if tc.extra != "" && !strings.Contains(out, tc.extra) {
			t.Errorf("%s: no %q in the plot", tc.name, tc.extra)
		}
	}
	pngFile := filepath.Join(dir, "q2.png")
	if _, err := runCLI("export", "--data", dir, "--format", "png", "--y", "J", "--units", "cgs", "--quadrant", "2", "-o", pngFile, "run-x"); err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(pngFile)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if _, err := png.Decode(f); err != nil { // the standard library's decoder
		t.Errorf("png: %v", err)
	}

	for _, tc := range []struct {
		args []string
		msg  string
	}{
		{[]string{"--format", "svg", "--y", "H"}, `--y: "H": want B or J`},
		{[]string{"--format", "svg", "--units", "imperial"}, `--units: "imperial": want si or cgs`},
		{[]string{"--format", "png", "--quadrant", "3"}, `--quadrant: "3": want 2 or nothing`},
		{[]string{"--format", "csv", "--y", "J"}, "--y: applies to --format svg or png, not csv"},
		{[]string{"--format", "json", "--quadrant", "2"}, "--quadrant: applies to --format svg or png, not json"},
	} {
		bad := filepath.Join(dir, "bad.out")
		_, err := runCLI(append([]string{"export", "--data", dir, "-o", bad, "run-x"}, tc.args...)...)
		var ee *exitError
		if !errors.As(err, &ee) || ee.code != 2 || !strings.Contains(err.Error(), tc.msg) {
			t.Errorf("%v: %v, want exit 2 with %q", tc.args, err, tc.msg)
		}
		if _, err := os.Stat(bad); !os.IsNotExist(err) {
			t.Errorf("%v: output file written on failure", tc.args)
		}
	}
}
