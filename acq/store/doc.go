// Package store is hystd's embedded record of truth: one SQLite file
// (modernc.org/sqlite, pure Go) holding runs, loops, raw and corrected
// samples, figures with uncertainties, corrections, events and the outbox
// that the time-series forwarder drains.
//
// Durability: the file is in WAL mode with synchronous=FULL, so a commit that
// returned is on disk. AddLoop writes a loop with everything derived from it
// and its outbox row in one transaction: after a crash either all of it is
// there or none of it.
//
// Concurrency: a *Store is safe for concurrent use. Writes go through one
// connection (SQLite has one writer); reads use a separate bounded pool and
// do not wait for writes.
//
// One SQLite file, `DATA/hystd.db`, written with the pure-Go driver modernc.org/sqlite. It is the record of
// truth: raw samples are always kept, never only corrected ones, and the time-series database is fed from it.
//
//   - Durability: WAL journal, `synchronous=FULL` (each commit is synced), `foreign_keys=ON`,
//     `busy_timeout=10000`, `_txlock=immediate`. One writer connection; reads use a separate pool of query-only
//     connections and never see half a loop.
//   - One transaction per loop: `AddLoop` writes the loop row, its raw samples, corrected points, figures,
//     corrections and its outbox entry together. After a crash or `kill -9` either all of it is there or none.
//   - NaN: SQLite has no NaN; a missing channel is stored as NULL and read back as NaN. All other float64
//     values come back bit for bit (tested with the binary64 extremes and ±Inf).
//   - Times are Unix nanoseconds (UTC); a zero `time.Time` is NULL. Sample times are nanoseconds since
//     the run started.
//   - Migrations: `PRAGMA user_version` holds the schema version; `Open` applies missing migrations in
//     order, each in its own transaction, and refuses a file written by a newer build.
//
// # Tables (schema version 6)
//
//	| table | key | columns |
//	| `runs` | `id` | recipe, recipe_text, fixture, specimen, material, config (snapshot), config_hash (SHA-256), software, state, reason, queued_ns, started_ns, ended_ns, grade, operator (all as recorded: revision 1), revision (the latest) |
//	| `revisions` | (run_id, n) | at_ns, by_name, change, fixture, specimen, material, grade, config, config_hash — rows only for re-processed runs, revision 1 included |
//	| `loops` | `id`; unique (run_id, revision, n) | kind, amplitude, amp_unit, started_ns, n_raw, n_points, ramped (1: the supply ramped continuously during the sweep; schema 6); raw samples hang on the revision-1 row only |
//	| `raw_samples` | (loop_id, seq) | t_ns (the flux reading's time), t_unc_ns, phase, setpoint, i_a, v_v, psi_wb, b_probe_t, temp_c, dt_i_ns, dt_b_ns (current's and field meter's read times minus t_ns) |
//	| `points` | (loop_id, seq) | t_ns, h_a_m, b_t, j_t, branch (+1, −1, 0) |
//	| `figures` | (loop_id, seq) | name, value, u (expanded, k = 2), unit, note |
//	| `corrections` | (loop_id, seq) | name, size, unit, note |
//	| `verdicts` | (loop_id, seq) | grade, figure, value, u, lo, hi (NULL: no such limit), unit, rule, outcome (pass, fail, undecided), note |
//	| `events` | id | run_id, at_ns, level, text |
//	| `outbox` | id | run_id, revision, loop_n, created_ns, updated_ns, state (pending, delivered, quarantined), done (points acknowledged), attempts, last_error |
//
// `runs.software` is `buildinfo.Info.Software()` of the build that recorded the run, e.g.
// `0.1.0~git20261202.1a2b3c4d5e6f (rev 1a2b3c4d5e6f, go1.26.8)`; runs recorded before it hold the bare
// version (`0.1.0-dev`).
//
// Version 1 keyed the sample tables by (run_id, loop_n); migration 2 rebuilds them keyed by the integer loop
// id (smaller rows: a 100 k-sample loop with a full-length run id commits in about half the time). Migrations run
// with foreign keys off and a `foreign_key_check` before the commit, as sqlite.org/lang_altertable.html
// describes; `TestMigrateFromV1` migrates a version-1 file with data. Migration 3 adds `dt_i_ns` and `dt_b_ns`
// (default 0: samples of older files read back with zero offsets); `TestMigrateFromV2` migrates a version-2 file.
// Migration 4 adds `runs.grade`, `runs.operator` (default ”) and the `verdicts` table; `TestMigrateFromV3File`
// opens `acq/store/testdata/v3.db`, a real file written by the schema-3 build (one finished run, one loop), and
// checks every value survives, old rows read back without grade or verdicts, and new loops with verdicts store.
// Migration 5 (revisions, package `acq/reprocess`) rebuilds `loops` and `outbox` with a revision column (existing
// rows become revision 1, ids kept); `TestMigrateFromV4File` opens `acq/store/testdata/v4.db` (written by the
// schema-4 build, see `v4-source/README.md`) and compares every row of every table before and after.
//
// Reading it by hand: `sqlite3 hystd-data/hystd.db "SELECT l.n, r.t_ns, r.i_a, r.psi_wb FROM loops l JOIN raw_samples r ON r.loop_id = l.id WHERE l.run_id = 'RUN'"`.
//
// # API
//
// `store.Open(ctx, path) (*Store, error)` / `OpenWith(ctx, path, Options{Now, ReadConns})`, `Close()`.
// `*Store` implements `record.Reader` (Runs newest first, Run, Loops without samples, Loop, Events, Trend) and
// `record.Writer` (CreateRun, SetState, AddLoop, AddEvent), and `store.Outbox` for the forwarder (Pending,
// Progress, Delivered, Retry, Quarantine, Backlog), plus `Quarantined`, `Requeue` and `Entry`. Unknown runs and
// loops wrap `record.ErrNotFound`; storing a run or loop twice wraps `store.ErrExists` and changes nothing.
//
// `acq/store/storetest` is the one suite every store and outbox passes (`storetest.Run(t, open)`); the SQLite
// store and `acq/store/memstore` (in memory, for tests of code that consumes a store) both run it.
//
// How a loop is committed. One transaction per loop (`BEGIN IMMEDIATE` … `COMMIT`, synchronous=FULL),
// on the writer connection: the run and loop-number checks, the `loops` row, then the raw samples and the
// points with one `INSERT … SELECT` each, the figures, corrections and verdicts in multi-row `INSERT`s of
// up to 256 rows with bound parameters, and the outbox row.
//
// The bulk rows do not go through parameters. modernc.org/sqlite binds a parameter with one call into
// SQLite, and every such call takes the connection's mutex (connections are opened SQLITE_OPEN_FULLMUTEX);
// for 1.5 M values per 100 k-sample loop that was about a third of the commit's processor time. Instead
// the store registers a virtual-table module, `hystd_bulk` (bulk.go), once per process, and each writer
// connection creates the table `temp.hystd_bulk` in its own temp schema (created inside the loop's
// transaction if the connection has none; never in the store file, which holds only the tables below). A
// query on it with `src = K` yields the rows of the loop's samples or points that AddLoop registered under
// key K for the length of that statement: column `seq` and the rowid are the row's index (the INSERT takes
// the rowid, which reaches SQLite without a Go value boxed per row), `c0` … the row's values as INTEGER,
// REAL, TEXT or NULL (a NaN). So `INSERT INTO raw_samples (loop_id, seq, t_ns, …) SELECT ?1, rowid,
// c0, … FROM temp.hystd_bulk WHERE src = ?2` writes the same typed rows a bound INSERT writes, in sequence
// order, with the foreign-key and NOT NULL checks of the schema, and the statement's count of rows must
// equal the loop's. A value equal to the one in the row before is handed over as that same Go value,
// not boxed again (phase, hold setpoints, timing offsets, branch repeat). `TestBulkRowsAreTypedSQL` checks
// every column's SQLite type and the NULLs; `TestBulkAfterRollbackAndReopen` a rolled-back insert, a
// reopened store and an empty loop.
//
// What was tried and left out (processor time of AddLoop per 100 k-sample commit from CPU profiles, on a
// machine at load 6–10; this design: 0.32–0.37 s): 256-row multi-row INSERTs with bound values, the loop
// id and first sequence number bound once per statement (the code before, 0.46–0.50 s); the same with
// `temp_store=MEMORY` (0.40–0.46 s: each
// multi-row INSERT into a table with a foreign key keeps a statement journal, which past 64 KiB SQLite
// moves to a temporary file for the rest of the transaction — with a single INSERT … SELECT per table the
// journal stays small, so the pragma is not needed); batches of 128 to 2 900 rows (none better than 256);
// a larger page cache (no less processor time); preparing the bulk statements once per connection
// (preparing was about 1 % of the time, and a statement held across loops would outlive a connection that
// database/sql closes).
package store
