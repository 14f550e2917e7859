package influx

import (
	"bytes"
	"flag"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/record"
)

var update = flag.Bool("update", false, "rewrite golden files")

var tStart = time.Date(2026, 3, 14, 9, 30, 0, 0, time.UTC)

func smallRun() record.Run {
	return record.Run{ID: "run-7", Fixture: "bench-ring-2", Specimen: "R-17", Material: "NiFe 50/50, tape",
		State: record.Finished, Started: tStart}
}

// smallLoop: one pre-hold sample, three sweep samples (one with the field
// meter missing), one post-hold sample.
func smallLoop() record.Loop {
	nan := math.NaN()
	return record.Loop{
		RunID: "run-7", N: 2, Kind: "loop", Started: tStart.Add(10 * time.Second),
		Raw: []record.Sample{
			{T: 10 * time.Second, Phase: record.PreHold, Setpoint: 0, I: 0.0001, V: nan, Psi: 2e-7, BProbe: nan, TempC: 23.5},
			{T: 11 * time.Second, Phase: record.Sweep, Setpoint: 0.5, I: 0.5, V: 0.25, Psi: 1.5e-4, BProbe: 0.002, TempC: 23.5},
			{T: 11*time.Second + 300*time.Microsecond, Phase: record.Sweep, Setpoint: 1, I: 1, V: 0.5, Psi: 3e-4, BProbe: nan, TempC: 23.5},
			{T: 12 * time.Second, Phase: record.Sweep, Setpoint: -1, I: -1, V: -0.5, Psi: -3e-4, BProbe: -0.004, TempC: 23.6},
			{T: 13 * time.Second, Phase: record.PostHold, Setpoint: nan, I: nan, V: nan, Psi: nan, BProbe: nan, TempC: nan},
		},
		Points: []record.Point{
			{T: 11 * time.Second, H: 400, B: 0.3, J: 0.3 - 1.25663706212e-6*400, Branch: 1},
			{T: 11*time.Second + 300*time.Microsecond, H: 800, B: 0.6, J: 0.6 - 1.25663706212e-6*800, Branch: 1},
			{T: 12 * time.Second, H: -800, B: -0.6, J: -0.6 + 1.25663706212e-6*800, Branch: -1},
		},
		Figures: []record.Figure{{Name: "Br", Value: 0.45, U: 0.01, Unit: "T"}, {Name: "HcB", Value: 35, U: nan, Unit: "A/m"}},
	}
}

// TestLineProtocolGolden: the points of a small loop as line protocol. The
// golden file was checked by hand against the InfluxDB line protocol
// reference (docs.influxdata.com, "Line protocol": measurement, comma-
// separated tags sorted by key, space, fields, space, integer timestamp; in
// tag values commas, equals signs and spaces are escaped with a backslash).
// The first timestamp, 1773480610000000000 ns, is 2026-03-14 09:30:10 UTC
// as `date -u -d "2026-03-14 09:30:10" +%s` (GNU coreutils) gives it.
func TestLineProtocolGolden(t *testing.T) {
	var buf bytes.Buffer
	n, err := WriteLineProtocol(&buf, smallRun(), smallLoop())
	if err != nil {
		t.Fatal(err)
	}
	// 5 raw samples, the last has no finite value: 4 sample points + 1 figure point.
	if n != 5 {
		t.Fatalf("%d points, want 5", n)
	}
	golden := filepath.Join("testdata", "small-loop.lp")
	if *update {
		if err := os.WriteFile(golden, buf.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatal(err)
	}
	if buf.String() != string(want) {
		t.Fatalf("line protocol differs from %s:\n got:\n%s\nwant:\n%s", golden, buf.String(), want)
	}
	// Escaping, by the reference's rules, independent of the golden file.
	if !strings.Contains(buf.String(), `material=NiFe\ 50/50\,\ tape`) {
		t.Error("tag value not escaped as the line protocol reference says")
	}
}

func TestPointsTimestamps(t *testing.T) {
	pts, err := Points(smallRun(), smallLoop())
	if err != nil {
		t.Fatal(err)
	}
	// Samples 1 and 2 are 0.3 ms apart: the second moves to the next millisecond.
	want := []time.Time{
		tStart.Add(10 * time.Second),
		tStart.Add(11 * time.Second),
		tStart.Add(11*time.Second + time.Millisecond),
		tStart.Add(12 * time.Second),
	}
	for i, w := range want {
		if !pts[i].Time().Equal(w) {
			t.Errorf("point %d at %v, want %v", i, pts[i].Time(), w)
		}
	}
	var tf float64
	for _, f := range pts[2].FieldList() {
		if f.Key == "t" {
			tf = f.Value.(float64)
		}
	}
	if tf != 11.0003 {
		t.Errorf("exact time field t = %v, want 11.0003", tf)
	}
	// Millisecond-distinct over a dense loop: 10 000 samples 100 µs apart.
	l := record.Loop{RunID: "run-7", N: 1}
	for i := 0; i < 10000; i++ {
		l.Raw = append(l.Raw, record.Sample{T: time.Duration(i) * 100 * time.Microsecond, Phase: record.Sweep, I: 1, Psi: 1})
	}
	pts, err = Points(smallRun(), l)
	if err != nil {
		t.Fatal(err)
	}
	seen := map[int64]bool{}
	for _, p := range pts {
		ms := p.Time().UnixMilli()
		if seen[ms] {
			t.Fatalf("two points in millisecond %d", ms)
		}
		seen[ms] = true
	}
	// Deterministic: built twice, the same bytes.
	var a, b bytes.Buffer
	if _, err := WriteLineProtocol(&a, smallRun(), smallLoop()); err != nil {
		t.Fatal(err)
	}
	if _, err := WriteLineProtocol(&b, smallRun(), smallLoop()); err != nil {
		t.Fatal(err)
	}
	if a.String() != b.String() {
		t.Fatal("points are not deterministic")
	}
}

func TestPointsNoStart(t *testing.T) {
	r := smallRun()
	r.Started = time.Time{}
	if _, err := Points(r, smallLoop()); err == nil {
		t.Fatal("run without start time gave points")
	}
}

func TestPointsFieldsAndTags(t *testing.T) {
	pts, err := Points(smallRun(), smallLoop())
	if err != nil {
		t.Fatal(err)
	}
	keys := func(i int) (fs, ts []string) {
		for _, f := range pts[i].FieldList() {
			fs = append(fs, f.Key)
		}
		for _, tg := range pts[i].TagList() {
			ts = append(ts, tg.Key+"="+tg.Value)
		}
		return
	}
	tests := []struct {
		i            int
		fields, tags string
	}{
		{0, "I psi setpoint t temp", "branch=hold-pre fixture=bench-ring-2 loop=2 material=NiFe 50/50, tape run=run-7 specimen=R-17"},
		{1, "B H I J V b_probe psi setpoint t temp", "branch=rising fixture=bench-ring-2 loop=2 material=NiFe 50/50, tape run=run-7 specimen=R-17"},
		{2, "B H I J V psi setpoint t temp", "branch=rising fixture=bench-ring-2 loop=2 material=NiFe 50/50, tape run=run-7 specimen=R-17"},
		{3, "B H I J V b_probe psi setpoint t temp", "branch=falling fixture=bench-ring-2 loop=2 material=NiFe 50/50, tape run=run-7 specimen=R-17"},
		{4, "Br Br_u HcB", "fixture=bench-ring-2 kind=loop loop=2 material=NiFe 50/50, tape run=run-7 specimen=R-17"},
	}
	for _, tc := range tests {
		fs, ts := keys(tc.i)
		if strings.Join(fs, " ") != tc.fields || strings.Join(ts, " ") != tc.tags {
			t.Errorf("point %d: fields %v tags %v\nwant fields %s tags %s", tc.i, fs, ts, tc.fields, tc.tags)
		}
	}
	if pts[4].Name() != FigureMeasurement || pts[0].Name() != SampleMeasurement {
		t.Error("measurement names")
	}
	if !pts[4].Time().Equal(tStart.Add(10 * time.Second)) {
		t.Errorf("figure point at %v, want the loop start", pts[4].Time())
	}
}

// BenchmarkPoints100k: building the points of a 100 000-sample loop.
func BenchmarkPoints100k(b *testing.B) {
	l := benchLoop(100_000)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := Points(smallRun(), l); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(l.Raw))*float64(b.N)/b.Elapsed().Seconds(), "points/s")
}

func benchLoop(n int) record.Loop {
	l := record.Loop{RunID: "run-7", N: 1, Kind: "loop", Started: tStart}
	for i := 0; i < n; i++ {
		x := float64(i) / float64(n)
		s := record.Sample{T: time.Duration(i) * 2 * time.Millisecond, Phase: record.Sweep, Setpoint: x, I: x, V: x / 2,
			Psi: 1e-3 * x, BProbe: math.NaN(), TempC: 23}
		l.Raw = append(l.Raw, s)
		l.Points = append(l.Points, record.Point{T: s.T, H: 1000 * x, B: x, J: x - 1.25663706212e-3*x, Branch: 1})
	}
	return l
}

// TestLinesMatchClientEncoder: the fast encoder gives, byte for byte, what
// the client library's own line-protocol encoder makes of Points, for loops
// with missing channels, dense timestamps and tag values that need escaping.
func TestLinesMatchClientEncoder(t *testing.T) {
	odd := smallRun()
	odd.Fixture, odd.Specimen, odd.Material, odd.ID = "bench=2, north", "R 17\tB", "Fe–Si 3 % \"GO\"", `run\7`
	bigger := benchLoop(3000)
	for i := range bigger.Raw {
		if i%7 == 0 {
			bigger.Raw[i].I = math.Inf(1)
		}
		if i%11 == 0 {
			bigger.Points[i].B = math.NaN()
		}
	}
	cases := []struct {
		name string
		r    record.Run
		l    record.Loop
	}{
		{"small", smallRun(), smallLoop()},
		{"odd tags", odd, smallLoop()},
		{"3000 with gaps", smallRun(), bigger},
		{"no figures", smallRun(), benchLoop(10)},
	}
	for _, c := range cases {
		pts, err := Points(c.r, c.l)
		if err != nil {
			t.Fatal(err)
		}
		lines, err := Lines(c.r, c.l)
		if err != nil {
			t.Fatal(err)
		}
		if len(lines) != len(pts) {
			t.Fatalf("%s: %d lines for %d points", c.name, len(lines), len(pts))
		}
		for i, p := range pts {
			var b bytes.Buffer
			if err := encode(&b, p); err != nil {
				t.Fatal(err)
			}
			if want := strings.TrimSuffix(b.String(), "\n"); lines[i] != want {
				t.Fatalf("%s line %d:\n got %s\nwant %s", c.name, i, lines[i], want)
			}
		}
	}
}

// BenchmarkLines100k: line protocol of a 100 000-sample loop.
func BenchmarkLines100k(b *testing.B) {
	l := benchLoop(100_000)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := Lines(smallRun(), l); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(l.Raw))*float64(b.N)/b.Elapsed().Seconds(), "points/s")
}

// FuzzLinesMatchClientEncoder: for any tag text and field values, the fast
// encoder agrees with the client library's encoder, or both refuse.
func FuzzLinesMatchClientEncoder(f *testing.F) {
	f.Add("bench-ring-2", "NiFe 50/50, tape", 400.0, 0.3, 1e-300)
	f.Add("a=b", "x\ny", math.Copysign(0, -1), math.MaxFloat64, 5e-324) // negative zero (a literal -0.0 is +0 in Go)
	f.Add(`back\slash`, "", 1e21, -1e-7, 123456789.125)
	f.Fuzz(func(t *testing.T, fixture, material string, h, b, psi float64) {
		r := smallRun()
		r.Fixture, r.Material = fixture, material
		l := record.Loop{RunID: r.ID, N: 1, Kind: "loop",
			Raw:    []record.Sample{{T: time.Second, Phase: record.Sweep, I: h / 100, Psi: psi, V: math.NaN(), BProbe: math.NaN(), Setpoint: math.NaN(), TempC: math.NaN()}},
			Points: []record.Point{{T: time.Second, H: h, B: b, J: b, Branch: 1}}}
		pts, perr := Points(r, l)
		lines, lerr := Lines(r, l)
		if perr != nil || lerr != nil {
			if (perr == nil) != (lerr == nil) {
				t.Fatalf("Points error %v, Lines error %v", perr, lerr)
			}
			return
		}
		var want []string
		for _, p := range pts {
			var buf bytes.Buffer
			if err := encode(&buf, p); err != nil {
				if len(lines) > 0 {
					// The library refuses what Lines encoded only if the
					// prefix (made by the library) would have failed too.
					t.Fatalf("library refuses %v: %v; Lines gave %q", p, err, lines)
				}
				return
			}
			want = append(want, strings.TrimSuffix(buf.String(), "\n"))
		}
		if strings.Join(lines, "\n") != strings.Join(want, "\n") {
			t.Fatalf("Lines:\n%s\nlibrary:\n%s", strings.Join(lines, "\n"), strings.Join(want, "\n"))
		}
	})
}
