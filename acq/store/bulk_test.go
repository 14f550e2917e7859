package store_test

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/acq/store"
	"hystd/acq/store/storetest"
)

// The bulk rows are ordinary typed SQL rows: each column's storage class
// (SQLite's typeof) is the one its declared type calls for, a NaN channel
// is NULL, and the store file holds no trace of the bulk table (it lives in
// the writer connection's temp schema).
func TestBulkRowsAreTypedSQL(t *testing.T) {
	ctx := context.Background()
	s := openTemp(t)
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := s.CreateRun(ctx, storetest.SampleRun("run-a", t0)); err != nil {
		t.Fatal(err)
	}
	l := storetest.SampleLoop("run-a", 1, 300, t0)
	if err := s.AddLoop(ctx, l); err != nil {
		t.Fatal(err)
	}
	nan := 0
	for _, r := range l.Raw {
		if math.IsNaN(r.BProbe) {
			nan++
		}
	}
	if nan == 0 || nan == len(l.Raw) {
		t.Fatalf("the sample loop has %d of %d field-meter readings missing; the test needs some of both", nan, len(l.Raw))
	}
	for _, c := range []struct{ q, want string }{
		{`SELECT DISTINCT typeof(loop_id)||typeof(seq)||typeof(t_ns)||typeof(t_unc_ns)||typeof(phase)||typeof(setpoint)||typeof(i_a)||typeof(v_v)||typeof(psi_wb)||typeof(temp_c)||typeof(dt_i_ns)||typeof(dt_b_ns) FROM raw_samples`,
			"integerintegerintegerintegertextrealrealrealrealrealintegerinteger"},
		{`SELECT k||' '||count(*) FROM (SELECT typeof(b_probe_t) AS k FROM raw_samples) GROUP BY k ORDER BY k`,
			fmt.Sprintf("null %d;real %d", nan, len(l.Raw)-nan)},
		{`SELECT DISTINCT typeof(loop_id)||typeof(seq)||typeof(t_ns)||typeof(h_a_m)||typeof(b_t)||typeof(j_t)||typeof(branch) FROM points`,
			"integerintegerintegerrealrealrealinteger"},
		{`SELECT count(*)||' '||min(seq)||' '||max(seq) FROM raw_samples`, "300 0 299"},
		{`SELECT count(*) FROM sqlite_schema WHERE sql LIKE '%hystd_bulk%'`, "0"},
	} {
		rows, err := s.WriterForTest().QueryContext(ctx, c.q)
		if err != nil {
			t.Fatal(err)
		}
		var got []string
		for rows.Next() {
			var v string
			if err := rows.Scan(&v); err != nil {
				t.Fatal(err)
			}
			got = append(got, v)
		}
		rows.Close()
		if strings.Join(got, ";") != c.want {
			t.Errorf("%s\n got %q, want %q", c.q, got, c.want)
		}
	}
}

// A transaction that wrote bulk rows and was rolled back leaves nothing
// (its temp bulk table included) and the next loop commits as usual; so
// does a loop after the store is reopened (a new writer connection) and a
// loop with no rows at all.
func TestBulkAfterRollbackAndReopen(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "hystd.db")
	s, err := store.Open(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := s.CreateRun(ctx, storetest.SampleRun("run-a", t0)); err != nil {
		t.Fatal(err)
	}
	l := storetest.SampleLoop("run-a", 1, 700, t0)
	tx, err := s.WriterForTest().BeginTx(ctx, nil)
	if err != nil {
		t.Fatal(err)
	}
	res, err := tx.ExecContext(ctx, `INSERT INTO loops (run_id, n, kind, amp_unit, n_raw, n_points) VALUES ('run-a', 1, 'major', 'A/m', 700, 0)`)
	if err != nil {
		t.Fatal(err)
	}
	id, _ := res.LastInsertId()
	if err := store.InsertRawForTest(ctx, tx, id, l.Raw); err != nil {
		t.Fatal(err)
	}
	if err := tx.Rollback(); err != nil {
		t.Fatal(err)
	}
	check := func(s *store.Store, n int, want record.Loop) {
		t.Helper()
		if err := s.AddLoop(ctx, want); err != nil {
			t.Fatalf("loop %d: %v", n, err)
		}
		got, err := s.Loop(ctx, "run-a", n)
		if err != nil {
			t.Fatal(err)
		}
		if fmt.Sprint(got.Raw, got.Points) != fmt.Sprint(want.Raw, want.Points) {
			t.Fatalf("loop %d reads back %d raw, %d points; want %d, %d", n, len(got.Raw), len(got.Points), len(want.Raw), len(want.Points))
		}
	}
	check(s, 1, l)
	var raw int
	if err := s.WriterForTest().QueryRowContext(ctx, `SELECT count(*) FROM raw_samples`).Scan(&raw); err != nil || raw != 700 {
		t.Fatalf("%d raw rows after a rolled-back insert and a loop of 700 (%v)", raw, err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	s, err = store.Open(ctx, path)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	check(s, 2, storetest.SampleLoop("run-a", 2, 513, t0))
	check(s, 3, record.Loop{RunID: "run-a", N: 3, Kind: "major", AmpUnit: "A/m"})
}

// The bulk table names its source: an unknown key is a clear error, and
// without `src = ?` the table is empty.
func TestBulkTableNeedsASource(t *testing.T) {
	ctx := context.Background()
	s := openTemp(t)
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	if err := s.CreateRun(ctx, storetest.SampleRun("run-a", t0)); err != nil {
		t.Fatal(err)
	}
	if err := s.AddLoop(ctx, storetest.SampleLoop("run-a", 1, 10, t0)); err != nil { // creates the bulk table
		t.Fatal(err)
	}
	var n int
	if err := s.WriterForTest().QueryRowContext(ctx, `SELECT count(*) FROM temp.hystd_bulk`).Scan(&n); err != nil || n != 0 {
		t.Fatalf("bulk table without a source: %d rows, %v", n, err)
	}
	err := s.WriterForTest().QueryRowContext(ctx, `SELECT count(*) FROM temp.hystd_bulk WHERE src = 987654321`).Scan(&n)
	if err == nil || !strings.Contains(err.Error(), "no source 987654321") {
		t.Fatalf("unknown source: %v", err)
	}
}

// Loops committed from several goroutines at once (each its own run) all
// read back whole: the sources are kept apart.
func TestBulkConcurrentLoops(t *testing.T) {
	ctx := context.Background()
	s := openTemp(t)
	t0 := time.Date(2026, 3, 14, 9, 0, 0, 0, time.UTC)
	const runs = 4
	var wg sync.WaitGroup
	errs := make(chan error, runs)
	for r := 0; r < runs; r++ {
		id := fmt.Sprintf("run-%d", r)
		if err := s.CreateRun(ctx, storetest.SampleRun(id, t0)); err != nil {
			t.Fatal(err)
		}
		wg.Add(1)
		go func() {
			defer wg.Done()
			for n := 1; n <= 3; n++ {
				if err := s.AddLoop(ctx, storetest.SampleLoop(id, n, 100*(r+1)+n, t0)); err != nil {
					errs <- err
					return
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Fatal(err)
	}
	for r := 0; r < runs; r++ {
		for n := 1; n <= 3; n++ {
			want := storetest.SampleLoop(fmt.Sprintf("run-%d", r), n, 100*(r+1)+n, t0)
			got, err := s.Loop(ctx, want.RunID, n)
			if err != nil {
				t.Fatal(err)
			}
			if fmt.Sprint(got.Raw, got.Points) != fmt.Sprint(want.Raw, want.Points) {
				t.Fatalf("%s loop %d does not read back as committed", want.RunID, n)
			}
		}
	}
}
