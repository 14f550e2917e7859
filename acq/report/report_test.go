package report

import (
	"bytes"
	"image/png"
	"io/fs"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"go.yaml.in/yaml/v3"

	"hystd/acq/calrec"
	"hystd/acq/config"
	"hystd/acq/record"
	"hystd/configs"
)

// poppler returns the path of a poppler tool, skipping the test when it is
// missing (failing under CI=true, where .ci/run installs poppler-utils).
func poppler(t *testing.T, tool string) string {
	t.Helper()
	p, err := exec.LookPath(tool)
	if err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("%s not found: install poppler-utils (apt)", tool)
		}
		t.Skipf("%s not found: install poppler-utils (apt) to check the report's rendering", tool)
	}
	return p
}

// sampleInput builds a run of the shipped ring R17-003 on the shipped ring
// fixture, with one loop: a tanh-shaped loop, figures, a correction and
// two verdicts against the shipped grade NO-R470.
func sampleInput(t *testing.T) Input {
	t.Helper()
	read := func(n string) []byte {
		b, err := fs.ReadFile(configs.Samples, n)
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	fx, err := config.ParseFixture("f.yaml", read("fixture-ring-bench.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	sp, err := config.ParseSpecimen("s.yaml", read("specimen-ring-r17.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	fy, _ := yaml.Marshal(fx)
	sy, _ := yaml.Marshal(sp)
	cfg := "# fixture\n" + string(fy) + "---\n# specimen\n" + string(sy) + "---\n# recipe r.yaml\nkind: recipe\n"
	t0 := time.Date(2026, 12, 1, 8, 30, 0, 0, time.UTC)
	run := record.Run{ID: "aldermoor-ring-2-20261201T083000Z-abc123", Recipe: "demo-ring", Fixture: fx.Name,
		Specimen: sp.ID, Material: sp.Material, Grade: sp.Grade, Operator: "J. Doe (invented)", Config: cfg,
		ConfigHash: "9e01509071cad04da0b15b035a7ad1f4d15552013536965bb569fe3b50a93e39", Software: "1.2.3-test",
		State: record.Finished, Started: t0, Ended: t0.Add(150 * time.Second)}
	l := record.Loop{RunID: run.ID, N: 1, Kind: "loop", Amplitude: 1000, AmpUnit: "A/m", Started: t0}
	for i := 0; i <= 400; i++ {
		x := 2 * math.Pi * float64(i) / 400
		h := 1000 * math.Cos(x)
		br := -1
		if math.Sin(x) > 0 {
			br = 1
		}
		b := 1.8 * math.Tanh((h+float64(br)*50)/300)
		l.Points = append(l.Points, record.Point{T: time.Duration(i) * 12 * time.Millisecond, H: h, B: b, J: b - 1.25663706212e-6*h, Branch: br})
		l.Raw = append(l.Raw, record.Sample{Phase: record.Sweep, TempC: 22.5, BProbe: math.NaN()})
	}
	l.Figures = []record.Figure{
		{Name: "Hmax", Value: 997.04, U: 5.61, Unit: "A/m", Note: "mean of |H| at the tips"},
		{Name: "HcB", Value: 50.0947, U: 2.6123, Unit: "A/m", Note: "H at B = 0, interpolated"},
		{Name: "loss_j_m3", Value: 366.2, U: 2.31, Unit: "J/m3", Note: "∮H dB per full cycle"},
	}
	l.Corrections = []record.Correction{{Name: "centering", Size: -1.81, Unit: "T"}}
	l.Verdicts = []record.Verdict{
		{Grade: "NO-R470", Figure: "HcB", Value: 50.0947, U: 2.6123, Min: math.NaN(), Max: 52, Unit: "A/m", Rule: "guarded-U",
			Outcome: record.Undecided, Note: "value ± U straddles a limit"},
		{Grade: "NO-R470", Figure: "Hmax", Value: 997.04, U: 5.61, Min: 900, Max: math.NaN(), Unit: "A/m", Rule: "guarded-U",
			Outcome: record.Pass},
	}
	evs := []record.Event{{RunID: run.ID, Text: "instrument supply: LAB-SIM,SUPPLY-X,0007,2.1"}}
	// The calibration events as a run records them (calrec.Use), for a
	// record past due at the run.
	cal, err := calrec.Load("../calrec/testdata/integrator-expired.yaml")
	if err != nil {
		t.Fatal(err)
	}
	_, cevs, err := calrec.Use([]calrec.Record{cal}, config.Fixture{}, run.Started)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range cevs {
		evs = append(evs, record.Event{RunID: run.ID, Level: e.Level, Text: e.Text})
	}
	return Input{Run: run, Loops: []record.Loop{l}, Generated: t0.Add(time.Hour), Software: "1.2.4-test", Events: evs}
}

// TestReportText renders the report with poppler's pdftotext and checks
// what a reader finds in it. The rounded figures follow GUM 7.2.6 (U to
// two significant digits, the value to the same decimal place).
func TestReportText(t *testing.T) {
	pdftotext := poppler(t, "pdftotext")
	var buf bytes.Buffer
	if err := Write(&buf, sampleInput(t)); err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	pdf := filepath.Join(dir, "r.pdf")
	if err := os.WriteFile(pdf, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(pdftotext, "-layout", pdf, "-").CombinedOutput()
	if err != nil {
		t.Fatalf("pdftotext: %v\n%s", err, out)
	}
	text := strings.Join(strings.Fields(string(out)), " ")
	for _, want := range []string{
		"Test report", "R17-003", "NO-steel batch R17 (invented)", "Grade NO-R470",
		"D = 50 mm, d = 40 mm, h = 10 mm", "Mass 0.0541 kg",
		"aldermoor-ring-2", "N1 = 200", "LAB-SIM,SUPPLY-X,0007,2.1 (profile sim-supply)", "identity not recorded",
		"Operator J. Doe (invented)", "2026-12-01 08:30:00 UTC", "finished after 2m30s", "specimen at 22.5 °C",
		"HcB 50.1 2.6 A/m", "Hmax 997.0 5.6 A/m", "loss per cycle 366.2 2.3 J/m3",
		"centering -1.81 T",
		"HcB = 50.1 ± 2.6 A/m, limit ≤ 52 A/m → undecided", "Hmax = 997.0 ± 5.6 A/m, limit ≥ 900 A/m → pass",
		"overall verdict: UNDECIDED", "guarded-U: guarded acceptance",
		"take precedence", "hystd 1.2.3-test", "hystd 1.2.4-test", "9e01509071cad04da0b15b035a7ad1f4d15552013536965bb569fe3b50a93e39",
		"Tested by", "Approved by",
		"Calibration CAL-INT-03 (integrator HOLLIN LAB,FLUXINT-2,0007,1.0; certificate HL-2024-0311, 2024-03-11, due 2025-03-11) — PAST DUE at the run",
	} {
		if !strings.Contains(text, want) {
			t.Errorf("report text lacks %q", want)
		}
	}
	if t.Failed() {
		t.Logf("text:\n%s", out)
	}
}

// TestReportRendersAPage renders the pages with pdftoppm: page 1 is an
// A4 page with text, and a page holds the loop plot (coloured trace pixels).
func TestReportRendersAPage(t *testing.T) {
	pdftoppm := poppler(t, "pdftoppm")
	var buf bytes.Buffer
	if err := Write(&buf, sampleInput(t)); err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	pdf := filepath.Join(dir, "r.pdf")
	if err := os.WriteFile(pdf, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	if out, err := exec.Command(pdftoppm, "-r", "100", "-png", pdf, filepath.Join(dir, "p")).CombinedOutput(); err != nil {
		t.Fatalf("pdftoppm: %v\n%s", err, out)
	}
	pages, _ := filepath.Glob(filepath.Join(dir, "p-*.png"))
	if len(pages) < 2 {
		t.Fatalf("%d pages rendered", len(pages))
	}
	coloured := 0
	for i, pg := range pages {
		f, err := os.Open(pg)
		if err != nil {
			t.Fatal(err)
		}
		img, err := png.Decode(f)
		f.Close()
		if err != nil {
			t.Fatal(err)
		}
		b := img.Bounds()
		// A4 is 210 × 297 mm: at 100 dpi 827 × 1169 px (±1).
		if i == 0 && (math.Abs(float64(b.Dx())-827) > 1 || math.Abs(float64(b.Dy())-1169) > 1) {
			t.Errorf("page 1 is %v, not A4 at 100 dpi", b)
		}
		dark := 0
		for y := b.Min.Y; y < b.Max.Y; y++ {
			for x := b.Min.X; x < b.Max.X; x++ {
				r, g, bl, _ := img.At(x, y).RGBA()
				if r < 0x8000 && g < 0x8000 && bl < 0x8000 {
					dark++
				}
				mx, mn := max(r, g, bl), min(r, g, bl)
				if mx-mn > 0x3000 {
					coloured++
				}
			}
		}
		if i == 0 && dark < 8000 {
			t.Errorf("page 1 has %d dark pixels: no text drawn?", dark)
		}
	}
	if coloured < 500 {
		t.Errorf("%d coloured pixels on all pages: no loop plot drawn?", coloured)
	} else {
		t.Logf("%d coloured pixels", coloured)
	}
}

// TestReportPlotsPerLoop: a soft loop gets one plot; a magnet's curve gets
// the second-quadrant plot too (counted with poppler's pdfimages).
func TestReportPlotsPerLoop(t *testing.T) {
	pdfimages := poppler(t, "pdfimages")
	for _, tc := range []struct {
		kind string
		want int
	}{{"loop", 1}, {"demag-curve", 2}} {
		in := sampleInput(t)
		in.Loops[0].Kind = tc.kind
		var buf bytes.Buffer
		if err := Write(&buf, in); err != nil {
			t.Fatal(err)
		}
		pdf := filepath.Join(t.TempDir(), "r.pdf")
		if err := os.WriteFile(pdf, buf.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
		out, err := exec.Command(pdfimages, "-list", pdf).CombinedOutput()
		if err != nil {
			t.Fatalf("pdfimages: %v\n%s", err, out)
		}
		n := 0
		for _, ln := range strings.Split(string(out), "\n") {
			if f := strings.Fields(ln); len(f) > 3 && f[2] == "image" {
				n++
			}
		}
		if n != tc.want {
			t.Errorf("%s: %d images, want %d\n%s", tc.kind, n, tc.want, out)
		}
	}
}
