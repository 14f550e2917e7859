package store_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/acq/store/storetest"
)

// nullable is a float for the peer's JSON: NaN is null (NULL in SQLite,
// as the store writes it).
type nullable float64

func (f nullable) MarshalJSON() ([]byte, error) {
	if math.IsNaN(float64(f)) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, float64(f), 'g', -1, 64), nil
}

// peerRows writes the rows of l as the peer script reads them.
func peerRows(tb testing.TB, path string, l record.Loop, now time.Time) {
	d := map[string]any{
		"run_id": l.RunID, "kind": l.Kind, "amplitude": nullable(l.Amplitude), "amp_unit": l.AmpUnit,
		"started_ns": l.Started.UnixNano(), "now_ns": now.UnixNano(),
	}
	var raw, pts, figs, cors, vers [][]any
	for _, r := range l.Raw {
		raw = append(raw, []any{int64(r.T), int64(r.TUnc), string(r.Phase), nullable(r.Setpoint), nullable(r.I), nullable(r.V),
			nullable(r.Psi), nullable(r.BProbe), nullable(r.TempC), int64(r.DtI), int64(r.DtB)})
	}
	for _, p := range l.Points {
		pts = append(pts, []any{int64(p.T), nullable(p.H), nullable(p.B), nullable(p.J), p.Branch})
	}
	for _, f := range l.Figures {
		figs = append(figs, []any{f.Name, nullable(f.Value), nullable(f.U), f.Unit, f.Note})
	}
	for _, c := range l.Corrections {
		cors = append(cors, []any{c.Name, nullable(c.Size), c.Unit, c.Note})
	}
	for _, v := range l.Verdicts {
		vers = append(vers, []any{v.Grade, v.Figure, nullable(v.Value), nullable(v.U), nullable(v.Min), nullable(v.Max), v.Unit, v.Rule, string(v.Outcome), v.Note})
	}
	d["raw"], d["points"], d["figures"], d["corrections"], d["verdicts"] = raw, pts, figs, cors, vers
	b, err := json.Marshal(d)
	if err != nil {
		tb.Fatal(err)
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		tb.Fatal(err)
	}
}

// cpuTime is the user plus system CPU time this process has used.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// loadAvg is the 1-minute load average (NaN where /proc is missing).
func loadAvg() float64 {
	raw, err := os.ReadFile("/proc/loadavg")
	if err != nil {
		return math.NaN()
	}
	v, _ := strconv.ParseFloat(strings.Fields(string(raw))[0], 64)
	return v
}

// BenchmarkCommitBesideSqlite3 commits the loop of BenchmarkAddLoop100k
// (100 000 raw samples, 80 000 points, figures, corrections, verdicts,
// outbox row) with AddLoop and, in turn, with CPython's sqlite3
// executemany (testdata/bench/commit_sqlite3.py) into the same store file
// (same schema) with the same pragmas; the order alternates. Each side's
// time is its transaction (the peer times BEGIN to COMMIT itself, so its
// interpreter start and JSON reading do not count). It reports go-s and
// py-s per commit, their ratio (go/py: below 1 hystd is faster) and the
// load average; ns/op covers a pair and the peer's process. Beside the
// wall times it reports the processor time of each side's transaction
// (go-cpu-s, py-cpu-s and their ratio cpu-go/py: user plus system time of
// the process, garbage collection included), which other work on a busy
// machine disturbs much less. It skips when python3 is missing.
func BenchmarkCommitBesideSqlite3(b *testing.B) {
	py, err := exec.LookPath("python3")
	if err != nil || exec.Command(py, "-c", "import sqlite3").Run() != nil {
		b.Skip("no python3 with sqlite3")
	}
	peer, err := filepath.Abs("../../testdata/bench/commit_sqlite3.py")
	if err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	s := openTemp(b)
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := s.CreateRun(ctx, storetest.SampleRun(benchRunID, t0)); err != nil {
		b.Fatal(err)
	}
	l := storetest.SampleLoop(benchRunID, 1, 100_000, t0)
	rows := filepath.Join(b.TempDir(), "rows.json")
	peerRows(b, rows, l, t0)
	n := 0
	goSide := func() (wall, cpu time.Duration) {
		n++
		l.N = n
		t, c := time.Now(), cpuTime()
		if err := s.AddLoop(ctx, l); err != nil {
			b.Fatal(err)
		}
		return time.Since(t), cpuTime() - c
	}
	pySide := func() (wall, cpu time.Duration) {
		n++
		var so, se bytes.Buffer
		cmd := exec.Command(py, peer, s.Path(), rows, strconv.Itoa(n))
		cmd.Stdout, cmd.Stderr = &so, &se
		if err := cmd.Run(); err != nil {
			b.Fatalf("peer: %v\n%s", err, se.Bytes())
		}
		var sec, csec float64
		if _, err := fmt.Sscan(so.String(), &sec, &csec); err != nil {
			b.Fatalf("peer printed %q: %v", so.String(), err)
		}
		if n <= 2 {
			b.Logf("peer: %s", strings.TrimSpace(se.String()))
		}
		return time.Duration(sec * float64(time.Second)), time.Duration(csec * float64(time.Second))
	}
	// One pair before timing: both warm the file and the page cache.
	goSide()
	pySide()
	load0 := loadAvg()
	var gs, ps, gc, pc time.Duration
	add := func(side func() (time.Duration, time.Duration), wall, cpu *time.Duration) {
		w, c := side()
		*wall += w
		*cpu += c
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if i%2 == 0 {
			add(goSide, &gs, &gc)
			add(pySide, &ps, &pc)
		} else {
			add(pySide, &ps, &pc)
			add(goSide, &gs, &gc)
		}
	}
	b.StopTimer()
	// The peer's rows must read back as the store's own.
	a, err := s.Loop(ctx, benchRunID, 1)
	if err != nil {
		b.Fatal(err)
	}
	p, err := s.Loop(ctx, benchRunID, 2)
	if err != nil {
		b.Fatal(err)
	}
	if fmt.Sprint(a.Raw, a.Points, a.Figures, a.Corrections, a.Verdicts) != fmt.Sprint(p.Raw, p.Points, p.Figures, p.Corrections, p.Verdicts) {
		b.Fatalf("the peer's loop reads back differently from AddLoop's")
	}
	nf := float64(b.N)
	b.ReportMetric(gs.Seconds()/nf, "go-s")
	b.ReportMetric(ps.Seconds()/nf, "py-s")
	b.ReportMetric(gs.Seconds()/ps.Seconds(), "go/py")
	b.ReportMetric(gc.Seconds()/nf, "go-cpu-s")
	b.ReportMetric(pc.Seconds()/nf, "py-cpu-s")
	b.ReportMetric(gc.Seconds()/pc.Seconds(), "cpu-go/py")
	b.ReportMetric((load0+loadAvg())/2, "load1")
}
