package store

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"errors"
	"fmt"
	"strings"
	"time"

	"hystd/acq/record"
)

// CreateRun stores a new run. The ID must be non-empty and new (ErrExists
// otherwise). ConfigHash must be the hex SHA-256 of Config; when empty the
// store computes it.
func (s *Store) CreateRun(ctx context.Context, r record.Run) error {
	if strings.TrimSpace(r.ID) == "" {
		return errors.New("store: create run: empty run id")
	}
	if r.State == "" {
		r.State = record.Queued
	}
	sum := sha256.Sum256([]byte(r.Config))
	if h := hex.EncodeToString(sum[:]); r.ConfigHash == "" {
		r.ConfigHash = h
	} else if !strings.EqualFold(r.ConfigHash, h) {
		return fmt.Errorf("store: create run %s: config hash %s is not the SHA-256 of the config snapshot (%s)", r.ID, r.ConfigHash, h)
	}
	if err := checkState(r.State); err != nil {
		return fmt.Errorf("store: create run %s: %w", r.ID, err)
	}
	_, err := s.w.ExecContext(ctx, `INSERT INTO runs
		(id, recipe, recipe_text, fixture, specimen, material, config, config_hash, software, state, reason, queued_ns, started_ns, ended_ns, grade, operator)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
		r.ID, r.Recipe, r.RecipeText, r.Fixture, r.Specimen, r.Material, r.Config, r.ConfigHash, r.Software,
		string(r.State), r.Reason, nsOf(r.Queued), nsOf(r.Started), nsOf(r.Ended), r.Grade, r.Operator)
	if err != nil {
		if isConstraint(err) {
			return fmt.Errorf("store: create run %s: %w", r.ID, ErrExists)
		}
		return fmt.Errorf("store: create run %s: %w", r.ID, err)
	}
	return nil
}

func checkState(st record.State) error {
	switch st {
	case record.Queued, record.Running, record.Finished, record.Aborted, record.Failed:
		return nil
	}
	return fmt.Errorf("unknown state %q", st)
}

// SetState moves a run to state st. Entering Running records at as the
// start time (unless one is set); entering a final state records at as the
// end time and reason. A run that has ended cannot change state again.
func (s *Store) SetState(ctx context.Context, id string, st record.State, reason string, at time.Time) error {
	if err := checkState(st); err != nil {
		return fmt.Errorf("store: run %s: %w", id, err)
	}
	tx, err := s.w.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("store: run %s: %w", id, err)
	}
	defer tx.Rollback()
	var cur string
	if err := tx.QueryRowContext(ctx, `SELECT state FROM runs WHERE id = ?`, id).Scan(&cur); err != nil {
		if errors.Is(err, sql.ErrNoRows) {
			return fmt.Errorf("store: run %s: %w", id, record.ErrNotFound)
		}
		return fmt.Errorf("store: run %s: %w", id, err)
	}
	if record.State(cur).Ended() {
		return fmt.Errorf("store: run %s has already ended (%s); cannot set %s", id, cur, st)
	}
	switch {
	case st == record.Running:
		_, err = tx.ExecContext(ctx, `UPDATE runs SET state = ?, started_ns = COALESCE(started_ns, ?) WHERE id = ?`,
			string(st), nsOf(at), id)
	case st.Ended():
		_, err = tx.ExecContext(ctx, `UPDATE runs SET state = ?, reason = ?, ended_ns = ? WHERE id = ?`,
			string(st), reason, nsOf(at), id)
	default:
		_, err = tx.ExecContext(ctx, `UPDATE runs SET state = ? WHERE id = ?`, string(st), id)
	}
	if err != nil {
		return fmt.Errorf("store: run %s: %w", id, err)
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("store: run %s: %w", id, err)
	}
	return nil
}

// AddEvent appends an event to a run (record.ErrNotFound for an unknown run).
func (s *Store) AddEvent(ctx context.Context, e record.Event) error {
	_, err := s.w.ExecContext(ctx, `INSERT INTO events (run_id, at_ns, level, text) VALUES (?, ?, ?, ?)`,
		e.RunID, nsOf(e.At), e.Level, e.Text)
	if err != nil {
		if isConstraint(err) {
			return fmt.Errorf("store: event for run %s: %w", e.RunID, record.ErrNotFound)
		}
		return fmt.Errorf("store: event for run %s: %w", e.RunID, err)
	}
	return nil
}

// AddLoop commits a loop with its raw samples, corrected points, figures,
// corrections and its outbox row in one transaction (synchronous=FULL: on
// disk when it returns). The run must exist (record.ErrNotFound) and the
// loop number must be new for the run (ErrExists); l.N starts at 1. On any
// error nothing is stored.
func (s *Store) AddLoop(ctx context.Context, l record.Loop) error {
	if l.N < 1 {
		return fmt.Errorf("store: loop of run %s: loop number %d, want ≥ 1", l.RunID, l.N)
	}
	tx, err := s.w.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("store: loop %d of run %s: %w", l.N, l.RunID, err)
	}
	defer tx.Rollback()
	if err := addLoop(ctx, tx, l, s.now()); err != nil {
		return fmt.Errorf("store: loop %d of run %s: %w", l.N, l.RunID, err)
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("store: loop %d of run %s: %w", l.N, l.RunID, err)
	}
	return nil
}

// AddRevision stores revision v of an ended run with all its loops
// (record.Reviser): the revision row (and, on the first re-process, the
// row of revision 1 as recorded), the loops without raw samples, their
// outbox entries and the run's latest revision, in one transaction.
// A loop number the run's revision 1 does not have is refused, as is a
// revision that is not the next one.
func (s *Store) AddRevision(ctx context.Context, v record.Revision, loops []record.Loop) error {
	fail := func(err error) error { return fmt.Errorf("store: revision %d of run %s: %w", v.N, v.RunID, err) }
	tx, err := s.w.BeginTx(ctx, nil)
	if err != nil {
		return fail(err)
	}
	defer tx.Rollback()
	run, err := scanRun(tx.QueryRowContext(ctx, "SELECT "+runCols+" FROM runs WHERE id = ?", v.RunID))
	if errors.Is(err, sql.ErrNoRows) {
		return fail(record.ErrNotFound)
	}
	if err != nil {
		return fail(err)
	}
	if err := CheckRevision(run, v, loops); err != nil {
		return fail(err)
	}
	if run.Revision == 1 {
		if err := insertRevision(ctx, tx, record.FirstRevision(run)); err != nil {
			return fail(err)
		}
	}
	if err := insertRevision(ctx, tx, v); err != nil {
		return fail(err)
	}
	now := s.now()
	for _, l := range loops {
		var one int
		if err := tx.QueryRowContext(ctx, `SELECT 1 FROM loops WHERE run_id = ? AND revision = 1 AND n = ?`, v.RunID, l.N).Scan(&one); err != nil {
			if errors.Is(err, sql.ErrNoRows) {
				return fail(fmt.Errorf("loop %d: not a loop of the run: %w", l.N, record.ErrNotFound))
			}
			return fail(err)
		}
		l.Revision = v.N
		if err := addLoop(ctx, tx, l, now); err != nil {
			return fail(fmt.Errorf("loop %d: %w", l.N, err))
		}
	}
	if _, err := tx.ExecContext(ctx, `UPDATE runs SET revision = ? WHERE id = ?`, v.N, v.RunID); err != nil {
		return fail(err)
	}
	if err := tx.Commit(); err != nil {
		return fail(err)
	}
	return nil
}

// CheckRevision is what every store refuses in AddRevision before it
// writes anything: a run that has not ended, a revision that is not the
// run's next, a config hash that is not the SHA-256 of the config, and
// loops of another run or revision.
func CheckRevision(run record.Run, v record.Revision, loops []record.Loop) error {
	if !run.State.Ended() {
		return fmt.Errorf("run is %s: only an ended run can be re-processed", run.State)
	}
	if next := max(run.Revision, 1) + 1; v.N != next {
		return fmt.Errorf("revision %d: the run's next revision is %d", v.N, next)
	}
	sum := sha256.Sum256([]byte(v.Config))
	if !strings.EqualFold(v.ConfigHash, hex.EncodeToString(sum[:])) {
		return fmt.Errorf("config hash %q is not the SHA-256 of the config snapshot", v.ConfigHash)
	}
	if len(loops) == 0 {
		return errors.New("no loops")
	}
	for _, l := range loops {
		if l.RunID != v.RunID || (l.Revision != 0 && l.Revision != v.N) {
			return fmt.Errorf("loop %d belongs to run %s revision %d", l.N, l.RunID, l.Revision)
		}
	}
	return nil
}

func insertRevision(ctx context.Context, tx *sql.Tx, v record.Revision) error {
	_, err := tx.ExecContext(ctx, `INSERT INTO revisions (run_id, n, at_ns, by_name, change, fixture, specimen, material, grade, config, config_hash)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
		v.RunID, v.N, nsOf(v.At), v.By, v.Change, v.Fixture, v.Specimen, v.Material, v.Grade, v.Config, v.ConfigHash)
	if isConstraint(err) {
		return ErrExists
	}
	return err
}

// batchRows is how many rows one multi-row INSERT of a small table
// (figures, corrections, verdicts) carries.
const batchRows = 256

// addLoop writes l in tx. The raw samples and points, the bulk of a loop,
// each go in one INSERT … SELECT from the writer's bulk table (bulk.go),
// which hands SQLite the rows' typed values straight from l; the small
// tables go in multi-row INSERTs with bound parameters.
func addLoop(ctx context.Context, tx *sql.Tx, l record.Loop, now time.Time) error {
	var one int
	if err := tx.QueryRowContext(ctx, `SELECT 1 FROM runs WHERE id = ?`, l.RunID).Scan(&one); err != nil {
		if errors.Is(err, sql.ErrNoRows) {
			return fmt.Errorf("run: %w", record.ErrNotFound)
		}
		return err
	}
	rev := max(l.Revision, 1)
	if err := tx.QueryRowContext(ctx, `SELECT 1 FROM loops WHERE run_id = ? AND revision = ? AND n = ?`, l.RunID, rev, l.N).Scan(&one); err == nil {
		return ErrExists
	} else if !errors.Is(err, sql.ErrNoRows) {
		return err
	}
	for i, v := range l.Verdicts {
		switch v.Outcome {
		case record.Pass, record.Fail, record.Undecided:
		default:
			return fmt.Errorf("verdict %d (%s): unknown outcome %q", i, v.Figure, v.Outcome)
		}
	}
	if rev > 1 {
		l.Raw = nil // the raw samples stay with the revision-1 row
	}
	res, err := tx.ExecContext(ctx, `INSERT INTO loops (run_id, revision, n, kind, amplitude, amp_unit, started_ns, n_raw, n_points, ramped)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
		l.RunID, rev, l.N, l.Kind, real(l.Amplitude), l.AmpUnit, nsOf(l.Started), len(l.Raw), len(l.Points), l.Ramped)
	if err != nil {
		return err
	}
	id, err := res.LastInsertId()
	if err != nil {
		return err
	}
	if err := insertBulk(ctx, tx, id, rawSource(l.Raw)); err != nil {
		return fmt.Errorf("raw samples: %w", err)
	}
	if err := insertBulk(ctx, tx, id, pointSource(l.Points)); err != nil {
		return fmt.Errorf("points: %w", err)
	}
	fig := func(i int, a []any) []any {
		f := l.Figures[i]
		return append(a, id, i, f.Name, real(f.Value), real(f.U), f.Unit, f.Note)
	}
	if err := insertRows(ctx, tx, "figures (loop_id, seq, name, value, u, unit, note)", 7, len(l.Figures), fig); err != nil {
		return fmt.Errorf("figures: %w", err)
	}
	cor := func(i int, a []any) []any {
		c := l.Corrections[i]
		return append(a, id, i, c.Name, real(c.Size), c.Unit, c.Note)
	}
	if err := insertRows(ctx, tx, "corrections (loop_id, seq, name, size, unit, note)", 6, len(l.Corrections), cor); err != nil {
		return fmt.Errorf("corrections: %w", err)
	}
	ver := func(i int, a []any) []any {
		v := l.Verdicts[i]
		return append(a, id, i, v.Grade, v.Figure, real(v.Value), real(v.U), real(v.Min), real(v.Max), v.Unit, v.Rule, string(v.Outcome), v.Note)
	}
	if err := insertRows(ctx, tx, "verdicts (loop_id, seq, grade, figure, value, u, lo, hi, unit, rule, outcome, note)", 12, len(l.Verdicts), ver); err != nil {
		return fmt.Errorf("verdicts: %w", err)
	}
	if _, err := tx.ExecContext(ctx, `INSERT INTO outbox (run_id, revision, loop_n, created_ns, state, updated_ns) VALUES (?, ?, ?, ?, 'pending', ?)`,
		l.RunID, rev, l.N, now.UnixNano(), now.UnixNano()); err != nil {
		return fmt.Errorf("outbox: %w", err)
	}
	return nil
}

// insertRows inserts n rows of cols columns into table in multi-row
// statements of batchRows rows; args appends row i's values.
func insertRows(ctx context.Context, tx *sql.Tx, table string, cols, n int, args func(i int, a []any) []any) error {
	if n == 0 {
		return nil
	}
	build := func(rows int) string {
		var b strings.Builder
		b.WriteString("INSERT INTO ")
		b.WriteString(table)
		b.WriteString(" VALUES ")
		row := "(" + strings.TrimSuffix(strings.Repeat("?,", cols), ",") + ")"
		for i := 0; i < rows; i++ {
			if i > 0 {
				b.WriteByte(',')
			}
			b.WriteString(row)
		}
		return b.String()
	}
	full := n / batchRows
	a := make([]any, 0, cols*batchRows)
	if full > 0 {
		st, err := tx.PrepareContext(ctx, build(batchRows))
		if err != nil {
			return err
		}
		defer st.Close()
		for k := 0; k < full; k++ {
			a = a[:0]
			for i := k * batchRows; i < (k+1)*batchRows; i++ {
				a = args(i, a)
			}
			if _, err := st.ExecContext(ctx, a...); err != nil {
				return err
			}
		}
	}
	if rest := n - full*batchRows; rest > 0 {
		a = a[:0]
		for i := full * batchRows; i < n; i++ {
			a = args(i, a)
		}
		if _, err := tx.ExecContext(ctx, build(rest), a...); err != nil {
			return err
		}
	}
	return nil
}

// isConstraint reports a SQLite constraint violation (unique, foreign key).
func isConstraint(err error) bool {
	var ce interface{ Code() int }
	return errors.As(err, &ce) && ce.Code()&0xff == 19 // SQLITE_CONSTRAINT
}
