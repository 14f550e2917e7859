package store_test

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/acq/store/storetest"
)

func openTemp(t testing.TB) *store.Store {
	t.Helper()
	s, err := store.Open(context.Background(), filepath.Join(t.TempDir(), "hystd.db"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

func TestSuite(t *testing.T) {
	storetest.Run(t, func(t *testing.T) storetest.Backend { return openTemp(t) })
}

func TestReopenKeepsEverything(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "hystd.db")
	s, err := store.Open(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	want := storetest.SampleLoop("run-a", 1, 200, t0)
	if err := s.CreateRun(ctx, storetest.SampleRun("run-a", t0)); err != nil {
		t.Fatal(err)
	}
	if err := s.AddLoop(ctx, want); err != nil {
		t.Fatal(err)
	}
	s.Close()
	s, err = store.Open(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	got, err := s.Loop(ctx, "run-a", 1)
	if err != nil {
		t.Fatal(err)
	}
	if d := storetest.SameLoop(got, want); d != "" {
		t.Fatal(d)
	}
	p, err := s.Pending(ctx, 0)
	if err != nil || len(p) != 1 {
		t.Fatalf("pending after reopen: %v %v", p, err)
	}
}

// TestPragmas checks the durability settings on the writer connection:
// journal_mode=wal and synchronous=2 (FULL), as the SQLite pragma
// documentation numbers them (sqlite.org/pragma.html#pragma_synchronous).
func TestPragmas(t *testing.T) {
	s := openTemp(t)
	var mode string
	var sync, fk int
	if err := s.WriterForTest().QueryRow("PRAGMA journal_mode").Scan(&mode); err != nil {
		t.Fatal(err)
	}
	if err := s.WriterForTest().QueryRow("PRAGMA synchronous").Scan(&sync); err != nil {
		t.Fatal(err)
	}
	if err := s.WriterForTest().QueryRow("PRAGMA foreign_keys").Scan(&fk); err != nil {
		t.Fatal(err)
	}
	if mode != "wal" || sync != 2 || fk != 1 {
		t.Fatalf("journal_mode=%s synchronous=%d foreign_keys=%d, want wal 2 1", mode, sync, fk)
	}
}

func TestOpenErrors(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	if _, err := store.Open(ctx, filepath.Join(dir, "missing", "hystd.db")); err == nil || !strings.Contains(err.Error(), "does not exist") {
		t.Errorf("missing directory: %v", err)
	}
	if _, err := store.Open(ctx, ""); err == nil {
		t.Error("empty path accepted")
	}
	// A file written by a newer build is refused and left alone.
	path := filepath.Join(dir, "newer.db")
	s, err := store.Open(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.WriterForTest().Exec(fmt.Sprintf("PRAGMA user_version = %d", store.SchemaVersion()+1)); err != nil {
		t.Fatal(err)
	}
	s.Close()
	if _, err := store.Open(ctx, path); err == nil || !strings.Contains(err.Error(), "newer") {
		t.Errorf("newer schema: %v", err)
	}
	// Not a database at all.
	junk := filepath.Join(dir, "junk.db")
	if err := os.WriteFile(junk, []byte(strings.Repeat("not sqlite\n", 200)), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := store.Open(ctx, junk); err == nil {
		t.Error("junk file opened")
	}
}

// TestReadWhileWriting: readers see whole loops only, never half of one.
func TestReadWhileWriting(t *testing.T) {
	ctx := context.Background()
	s := openTemp(t)
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := s.CreateRun(ctx, storetest.SampleRun("run-a", t0)); err != nil {
		t.Fatal(err)
	}
	done := make(chan error)
	go func() {
		for n := 1; n <= 20; n++ {
			if err := s.AddLoop(ctx, storetest.SampleLoop("run-a", n, 300, t0)); err != nil {
				done <- err
				return
			}
		}
		done <- nil
	}()
	for {
		select {
		case err := <-done:
			if err != nil {
				t.Fatal(err)
			}
			return
		default:
		}
		ls, err := s.Loops(ctx, "run-a")
		if err != nil {
			t.Fatal(err)
		}
		for _, l := range ls {
			if len(l.Figures) != 2 || len(l.Corrections) != 1 {
				t.Fatalf("loop %d seen partly: %d figures", l.N, len(l.Figures))
			}
		}
		if len(ls) > 0 {
			l, err := s.Loop(ctx, "run-a", ls[len(ls)-1].N)
			if err != nil {
				t.Fatal(err)
			}
			if len(l.Raw) != 300 {
				t.Fatalf("loop %d seen with %d raw samples", l.N, len(l.Raw))
			}
		}
	}
}

// BenchmarkAddLoop100k: the local commit of one loop of 100 000 raw samples
// and 80 000 corrected points (target: under 1 s, PRODUCT.md).
func BenchmarkAddLoop100k(b *testing.B) {
	ctx := context.Background()
	s := openTemp(b)
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := s.CreateRun(ctx, storetest.SampleRun(benchRunID, t0)); err != nil {
		b.Fatal(err)
	}
	l := storetest.SampleLoop(benchRunID, 1, 100_000, t0)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		l.N = i + 1
		if err := s.AddLoop(ctx, l); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(l.Raw)+len(l.Points))*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}

// BenchmarkLoop100k: reading back one loop of 100 000 raw samples.
func BenchmarkLoop100k(b *testing.B) {
	ctx := context.Background()
	s := openTemp(b)
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := s.CreateRun(ctx, storetest.SampleRun("run-a", t0)); err != nil {
		b.Fatal(err)
	}
	if err := s.AddLoop(ctx, storetest.SampleLoop("run-a", 1, 100_000, t0)); err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := s.Loop(ctx, "run-a", 1); err != nil {
			b.Fatal(err)
		}
	}
}

func TestRequeue(t *testing.T) {
	ctx := context.Background()
	s := openTemp(t)
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := s.CreateRun(ctx, storetest.SampleRun("run-a", t0)); err != nil {
		t.Fatal(err)
	}
	if err := s.AddLoop(ctx, storetest.SampleLoop("run-a", 1, 20, t0)); err != nil {
		t.Fatal(err)
	}
	p, _ := s.Pending(ctx, 0)
	id := p[0].ID
	if err := s.Progress(ctx, id, 7); err != nil {
		t.Fatal(err)
	}
	if err := s.Quarantine(ctx, id, "HTTP 422: beyond retention"); err != nil {
		t.Fatal(err)
	}
	if err := s.Requeue(ctx, id); err != nil {
		t.Fatal(err)
	}
	e, err := s.Entry(ctx, id)
	if err != nil {
		t.Fatal(err)
	}
	if e.State != store.StatePending || e.Done != 7 || e.LastError != "HTTP 422: beyond retention" {
		t.Fatalf("after requeue: %+v", e)
	}
	if err := s.Requeue(ctx, id); err == nil {
		t.Fatal("requeue of a pending entry succeeded")
	}
}

// benchRunID has the length of the run ids the engine makes (fixture, UTC
// time, random suffix).
const benchRunID = "aldermoor-ring-2-20261201T230230Z-1ec464"

// TestMigrateFromV1: a file written with schema 1 (samples keyed by run id
// and loop number) is rebuilt to the current schema on Open, keeping every
// value, and the outbox entry still points at its loop.
func TestMigrateFromV1(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "hystd.db")
	db, err := store.CreateAtVersionForTest(ctx, path, 1)
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	r := storetest.SampleRun("run-old", t0)
	stmts := []struct {
		q    string
		args []any
	}{
		{`INSERT INTO runs VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, 'finished', '', ?, ?, ?)`,
			[]any{r.ID, r.Recipe, r.RecipeText, r.Fixture, r.Specimen, r.Material, r.Config, r.ConfigHash, r.Software,
				r.Queued.UnixNano(), r.Started.UnixNano(), t0.Add(time.Hour).UnixNano()}},
		{`INSERT INTO loops VALUES ('run-old', 1, 'loop', 8000, 'A/m', ?, 2, 1)`, []any{t0.UnixNano()}},
		{`INSERT INTO raw_samples VALUES ('run-old', 1, 0, 0, 1000, 'pre', 0, 0.001, NULL, 2e-7, NULL, 23.5)`, nil},
		{`INSERT INTO raw_samples VALUES ('run-old', 1, 1, 2000000, 1000, 'sweep', 1.5, 1.5, 0.7, 3e-4, 0.01, 23.6)`, nil},
		{`INSERT INTO points VALUES ('run-old', 1, 0, 2000000, 6000, 1.1, 1.0924601776272, -1)`, nil},
		{`INSERT INTO figures VALUES ('run-old', 1, 0, 'Br', 0.61, 0.004, 'T', 'mean of both branches')`, nil},
		{`INSERT INTO figures VALUES ('run-old', 1, 1, 'HcB', 12.5, NULL, 'A/m', '')`, nil},
		{`INSERT INTO corrections VALUES ('run-old', 1, 0, 'closure', -0.004, 'T', '')`, nil},
		{`INSERT INTO outbox (run_id, loop_n, created_ns, state, done, updated_ns) VALUES ('run-old', 1, 5, 'pending', 1, 5)`, nil},
	}
	for _, st := range stmts {
		if _, err := db.Exec(st.q, st.args...); err != nil {
			t.Fatalf("%s: %v", st.q, err)
		}
	}
	db.Close()

	s, err := store.Open(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	var v int
	if err := s.WriterForTest().QueryRow("PRAGMA user_version").Scan(&v); err != nil || v != store.SchemaVersion() {
		t.Fatalf("schema version %d (%v), want %d", v, err, store.SchemaVersion())
	}
	l, err := s.Loop(ctx, "run-old", 1)
	if err != nil {
		t.Fatal(err)
	}
	if len(l.Raw) != 2 || l.Raw[1].Psi != 3e-4 || !math.IsNaN(l.Raw[0].V) || l.Raw[1].T != 2*time.Millisecond ||
		len(l.Points) != 1 || l.Points[0].H != 6000 || l.Points[0].Branch != -1 ||
		len(l.Figures) != 2 || !math.IsNaN(l.Figures[1].U) || l.Corrections[0].Name != "closure" {
		t.Fatalf("migrated loop %+v", l)
	}
	p, err := s.Pending(ctx, 0)
	if err != nil || len(p) != 1 || p[0].Done != 1 || p[0].Loop != 1 {
		t.Fatalf("migrated outbox %+v %v", p, err)
	}
	// The migrated file takes new loops as usual.
	if err := s.AddLoop(ctx, storetest.SampleLoop("run-old", 2, 30, t0)); err != nil {
		t.Fatal(err)
	}
	tr, err := s.Trend(ctx, r.Specimen, "Br", time.Time{})
	if err != nil || len(tr) != 2 {
		t.Fatalf("trend after migration: %+v %v", tr, err)
	}
	var fk int
	if err := s.WriterForTest().QueryRow("PRAGMA foreign_keys").Scan(&fk); err != nil || fk != 1 {
		t.Fatalf("foreign_keys after migration: %d %v", fk, err)
	}
}

// TestMigrateFromV2: a file written with schema 2 (samples without the
// channels' time offsets) gains the offset columns on Open; its samples read
// back with zero offsets and every other value kept, and new loops keep
// their offsets.
func TestMigrateFromV2(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "hystd.db")
	db, err := store.CreateAtVersionForTest(ctx, path, 2)
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	r := storetest.SampleRun("run-v2", t0)
	stmts := []struct {
		q    string
		args []any
	}{
		{`INSERT INTO runs VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, 'finished', '', ?, ?, ?)`,
			[]any{r.ID, r.Recipe, r.RecipeText, r.Fixture, r.Specimen, r.Material, r.Config, r.ConfigHash, r.Software,
				r.Queued.UnixNano(), r.Started.UnixNano(), t0.Add(time.Hour).UnixNano()}},
		{`INSERT INTO loops (id, run_id, n, kind, amplitude, amp_unit, started_ns, n_raw, n_points) VALUES (7, 'run-v2', 1, 'loop', 8000, 'A/m', ?, 2, 0)`, []any{t0.UnixNano()}},
		{`INSERT INTO raw_samples VALUES (7, 0, 0, 1000, 'pre', 0, 0.001, NULL, 2e-7, NULL, 23.5)`, nil},
		{`INSERT INTO raw_samples VALUES (7, 1, 2000000, 1000, 'sweep', 1.5, 1.5, 0.7, 3e-4, 0.01, 23.6)`, nil},
	}
	for _, st := range stmts {
		if _, err := db.Exec(st.q, st.args...); err != nil {
			t.Fatalf("%s: %v", st.q, err)
		}
	}
	db.Close()

	s, err := store.Open(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	var v int
	if err := s.WriterForTest().QueryRow("PRAGMA user_version").Scan(&v); err != nil || v != store.SchemaVersion() {
		t.Fatalf("schema version %d (%v), want %d", v, err, store.SchemaVersion())
	}
	l, err := s.Loop(ctx, "run-v2", 1)
	if err != nil {
		t.Fatal(err)
	}
	if len(l.Raw) != 2 || l.Raw[1].Psi != 3e-4 || l.Raw[1].I != 1.5 || l.Raw[1].BProbe != 0.01 || l.Raw[1].T != 2*time.Millisecond ||
		l.Raw[0].DtI != 0 || l.Raw[0].DtB != 0 || l.Raw[1].DtI != 0 || l.Raw[1].DtB != 0 {
		t.Fatalf("migrated samples %+v", l.Raw)
	}
	want := storetest.SampleLoop("run-v2", 2, 30, t0)
	if err := s.AddLoop(ctx, want); err != nil {
		t.Fatal(err)
	}
	got, err := s.Loop(ctx, "run-v2", 2)
	if err != nil {
		t.Fatal(err)
	}
	if d := storetest.SameLoop(got, want); d != "" {
		t.Fatal(d)
	}
}

// TestMigrateFromV3File: testdata/v3.db is a real store file written by
// hystd with schema 3 (one finished run, one loop). Opened by this build it
// is migrated to schema 4 (and on to the latest) keeping every value; its run reads back without
// grade or operator and its loop without verdicts; a new loop with verdicts
// is stored beside it.
func TestMigrateFromV3File(t *testing.T) {
	ctx := context.Background()
	src, err := os.ReadFile("testdata/v3.db")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "hystd.db")
	if err := os.WriteFile(path, src, 0o600); err != nil {
		t.Fatal(err)
	}
	s, err := store.Open(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	var v int
	if err := s.WriterForTest().QueryRow("PRAGMA user_version").Scan(&v); err != nil || v != 6 || v != store.SchemaVersion() {
		t.Fatalf("schema version %d (%v), want 6", v, err)
	}
	r, err := s.Run(ctx, "ring-v3-run")
	if err != nil {
		t.Fatal(err)
	}
	if r.Specimen != "OLD-1" || r.State != record.Finished || r.Grade != "" || r.Operator != "" || r.Software != "v3" {
		t.Fatalf("migrated run %+v", r)
	}
	l, err := s.Loop(ctx, r.ID, 1)
	if err != nil {
		t.Fatal(err)
	}
	if len(l.Raw) != 2 || l.Raw[1].Psi != 2e-3 || len(l.Points) != 2 || l.Points[1].B != 0.9 ||
		len(l.Figures) != 2 || l.Figures[0].Name != "HcB" || l.Figures[0].Value != 50 || len(l.Corrections) != 1 || len(l.Verdicts) != 0 {
		t.Fatalf("migrated loop %+v", l)
	}
	t0 := time.Date(2026, 12, 1, 9, 0, 0, 0, time.UTC)
	nr := storetest.SampleRun("run-v4", t0)
	if err := s.CreateRun(ctx, nr); err != nil {
		t.Fatal(err)
	}
	want := storetest.SampleLoop("run-v4", 1, 30, t0)
	if err := s.AddLoop(ctx, want); err != nil {
		t.Fatal(err)
	}
	got, err := s.Loop(ctx, "run-v4", 1)
	if err != nil {
		t.Fatal(err)
	}
	if d := storetest.SameLoop(got, want); d != "" {
		t.Fatal(d)
	}
	if gr, err := s.Run(ctx, "run-v4"); err != nil || gr.Grade != "TAPE-50" || gr.Operator != "bay 2" {
		t.Fatalf("new run %+v %v", gr, err)
	}
	// A verdict with an unknown outcome is refused and nothing of its loop is kept.
	bad := storetest.SampleLoop("run-v4", 2, 30, t0)
	bad.Verdicts[0].Outcome = "maybe"
	if err := s.AddLoop(ctx, bad); err == nil || !strings.Contains(err.Error(), "unknown outcome") {
		t.Fatalf("bad verdict: %v", err)
	}
	if _, err := s.Loop(ctx, "run-v4", 2); !errors.Is(err, record.ErrNotFound) {
		t.Fatalf("loop with a bad verdict was kept: %v", err)
	}
}

// dumpV4 reads every row of every schema-4 table through db, each row as
// text, with the schema-4 column lists (so the same query reads the file
// before and after the migration to 5).
func dumpV4(t *testing.T, db interface {
	Query(string, ...any) (*sql.Rows, error)
}) map[string][]string {
	t.Helper()
	tables := map[string]string{
		"runs":        "SELECT id, recipe, recipe_text, fixture, specimen, material, config, config_hash, software, state, reason, queued_ns, started_ns, ended_ns, grade, operator FROM runs ORDER BY id",
		"loops":       "SELECT id, run_id, n, kind, amplitude, amp_unit, started_ns, n_raw, n_points FROM loops ORDER BY id",
		"raw_samples": "SELECT * FROM raw_samples ORDER BY loop_id, seq",
		"points":      "SELECT * FROM points ORDER BY loop_id, seq",
		"figures":     "SELECT * FROM figures ORDER BY loop_id, seq",
		"corrections": "SELECT * FROM corrections ORDER BY loop_id, seq",
		"verdicts":    "SELECT * FROM verdicts ORDER BY loop_id, seq",
		"events":      "SELECT * FROM events ORDER BY id",
		"outbox":      "SELECT id, run_id, loop_n, created_ns, state, done, attempts, last_error, updated_ns FROM outbox ORDER BY id",
	}
	out := map[string][]string{}
	for name, q := range tables {
		rows, err := db.Query(q)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		cols, _ := rows.Columns()
		for rows.Next() {
			vals := make([]any, len(cols))
			ptrs := make([]any, len(cols))
			for i := range vals {
				ptrs[i] = &vals[i]
			}
			if err := rows.Scan(ptrs...); err != nil {
				t.Fatal(err)
			}
			out[name] = append(out[name], fmt.Sprintf("%#v", vals))
		}
		rows.Close()
	}
	return out
}

// TestMigrateFromV4File: testdata/v4.db is a real store file written by the
// schema-4 build (testdata/v4-source/README.md: two imported runs, one loop
// of 1280 raw samples each). Opened by this build it is migrated to the
// latest schema: every row of every table reads back identical (a loop of
// schema 4 reads back stepped: not ramped), each run is revision 1
// with FirstRevision as its one revision, its loops are revision 1 and its
// outbox entries send revision 1. A revision 2 is then stored beside it.
func TestMigrateFromV4File(t *testing.T) {
	ctx := context.Background()
	src, err := os.ReadFile("testdata/v4.db")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "hystd.db")
	if err := os.WriteFile(path, src, 0o600); err != nil {
		t.Fatal(err)
	}
	raw, err := sql.Open("sqlite", path)
	if err != nil {
		t.Fatal(err)
	}
	var v int
	if err := raw.QueryRow("PRAGMA user_version").Scan(&v); err != nil || v != 4 {
		t.Fatalf("testdata/v4.db has schema %d (%v), want 4", v, err)
	}
	before := dumpV4(t, raw)
	raw.Close()
	if len(before["runs"]) != 2 || len(before["raw_samples"]) != 2560 || len(before["outbox"]) != 2 {
		t.Fatalf("testdata/v4.db: %d runs, %d raw samples, %d outbox entries; want 2, 2560, 2",
			len(before["runs"]), len(before["raw_samples"]), len(before["outbox"]))
	}
	s, err := store.Open(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if err := s.WriterForTest().QueryRow("PRAGMA user_version").Scan(&v); err != nil || v != store.SchemaVersion() {
		t.Fatalf("schema version %d (%v), want %d", v, err, store.SchemaVersion())
	}
	after := dumpV4(t, s.WriterForTest())
	for name, rows := range before {
		if len(after[name]) != len(rows) {
			t.Fatalf("%s: %d rows after the migration, %d before", name, len(after[name]), len(rows))
		}
		for i := range rows {
			if after[name][i] != rows[i] {
				t.Fatalf("%s row %d changed:\n before %s\n after  %s", name, i, rows[i], after[name][i])
			}
		}
	}
	runs, err := s.Runs(ctx, record.RunFilter{})
	if err != nil || len(runs) != 2 {
		t.Fatalf("runs %v %v", runs, err)
	}
	for _, r := range runs {
		revs, err := s.Revisions(ctx, r.ID)
		if err != nil || r.Revision != 1 || len(revs) != 1 || revs[0] != record.FirstRevision(r) || revs[0].By != "bay 3" {
			t.Fatalf("run %s: revision %d, revisions %+v (%v)", r.ID, r.Revision, revs, err)
		}
		l1, err := s.LoopOf(ctx, r.ID, 1, 1)
		if err != nil || l1.Revision != 1 || len(l1.Raw) != 1280 || len(l1.Points) == 0 || len(l1.Figures) == 0 || l1.Ramped {
			t.Fatalf("run %s loop 1 revision 1: %d raw, %d points, %d figures (%v)", r.ID, len(l1.Raw), len(l1.Points), len(l1.Figures), err)
		}
		if l, err := s.Loop(ctx, r.ID, 1); err != nil || storetest.SameLoop(l, l1) != "" {
			t.Fatalf("latest loop of run %s differs from revision 1: %v %s", r.ID, err, storetest.SameLoop(l, l1))
		}
	}
	p, err := s.Pending(ctx, 0)
	if err != nil || len(p) != 2 || p[0].Revision != 1 || p[1].Revision != 1 {
		t.Fatalf("outbox after the migration: %+v %v", p, err)
	}
	// A revision 2 of a migrated run is stored with its outbox entry (the
	// rebuilt outbox's foreign key holds).
	r := runs[0]
	l1, _ := s.LoopOf(ctx, r.ID, 1, 1)
	l2 := l1
	l2.Revision, l2.Raw = 2, nil
	cfg := "# specimen\nid: X\n"
	sum := sha256.Sum256([]byte(cfg))
	v2 := record.Revision{RunID: r.ID, N: 2, At: time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC), By: "alba",
		Change: "test", Config: cfg, ConfigHash: hex.EncodeToString(sum[:])}
	if err := s.AddRevision(ctx, v2, []record.Loop{l2}); err != nil {
		t.Fatal(err)
	}
	if got, err := s.LoopOf(ctx, r.ID, 1, 2); err != nil || len(got.Raw) != 1280 || got.Revision != 2 {
		t.Fatalf("revision 2 of a migrated run: %d raw (%v)", len(got.Raw), err)
	}
	if p, _ := s.Pending(ctx, 0); len(p) != 3 || p[2].Revision != 2 {
		t.Fatalf("outbox after revision 2: %+v", p)
	}
}
