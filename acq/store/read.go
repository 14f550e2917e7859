package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"math"
	"strings"
	"time"

	"hystd/acq/record"
)

// DefaultRunLimit is how many runs Runs returns when the filter sets no limit.
const DefaultRunLimit = 100

const runCols = `id, recipe, recipe_text, fixture, specimen, material, config, config_hash, software, state, reason, queued_ns, started_ns, ended_ns, grade, operator, revision`

func scanRun(sc interface{ Scan(...any) error }) (record.Run, error) {
	var r record.Run
	var st string
	var q, s, e sql.NullInt64
	err := sc.Scan(&r.ID, &r.Recipe, &r.RecipeText, &r.Fixture, &r.Specimen, &r.Material, &r.Config, &r.ConfigHash,
		&r.Software, &st, &r.Reason, &q, &s, &e, &r.Grade, &r.Operator, &r.Revision)
	r.State, r.Queued, r.Started, r.Ended = record.State(st), timeOf(q), timeOf(s), timeOf(e)
	return r, err
}

// Runs returns the runs matching f, newest first (by start time, runs not yet
// started by queue time), at most f.Limit (DefaultRunLimit when 0).
func (s *Store) Runs(ctx context.Context, f record.RunFilter) ([]record.Run, error) {
	var where []string
	var args []any
	add := func(cond string, v any) { where = append(where, cond); args = append(args, v) }
	if f.Fixture != "" {
		add("fixture = ?", f.Fixture)
	}
	if f.Specimen != "" {
		add("specimen = ?", f.Specimen)
	}
	if f.Material != "" {
		add("material = ?", f.Material)
	}
	if f.State != "" {
		add("state = ?", string(f.State))
	}
	if !f.Since.IsZero() {
		add("started_ns >= ?", f.Since.UnixNano())
	}
	if !f.Until.IsZero() {
		add("started_ns < ?", f.Until.UnixNano())
	}
	lim := f.Limit
	if lim <= 0 {
		lim = DefaultRunLimit
	}
	q := "SELECT " + runCols + " FROM runs"
	if len(where) > 0 {
		q += " WHERE " + strings.Join(where, " AND ")
	}
	q += " ORDER BY COALESCE(started_ns, queued_ns) DESC, id DESC LIMIT ?"
	args = append(args, lim)
	rows, err := s.r.QueryContext(ctx, q, args...)
	if err != nil {
		return nil, fmt.Errorf("store: runs: %w", err)
	}
	defer rows.Close()
	var out []record.Run
	for rows.Next() {
		r, err := scanRun(rows)
		if err != nil {
			return nil, fmt.Errorf("store: runs: %w", err)
		}
		out = append(out, r)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store: runs: %w", err)
	}
	return out, nil
}

// Run returns one run, or an error wrapping record.ErrNotFound.
func (s *Store) Run(ctx context.Context, id string) (record.Run, error) {
	r, err := scanRun(s.r.QueryRowContext(ctx, "SELECT "+runCols+" FROM runs WHERE id = ?", id))
	if errors.Is(err, sql.ErrNoRows) {
		return record.Run{}, fmt.Errorf("store: run %s: %w", id, record.ErrNotFound)
	}
	if err != nil {
		return record.Run{}, fmt.Errorf("store: run %s: %w", id, err)
	}
	return r, nil
}

// Loops returns the loops of a run's latest revision in order with figures
// and corrections but without Raw and Points; record.ErrNotFound for an
// unknown run.
func (s *Store) Loops(ctx context.Context, runID string) ([]record.Loop, error) {
	return s.LoopsOf(ctx, runID, 0)
}

// revisionOf resolves rev (0: the latest) of a run in tx; record.ErrNotFound
// for an unknown run or revision.
func revisionOf(ctx context.Context, tx *sql.Tx, runID string, rev int) (int, error) {
	var latest int
	if err := tx.QueryRowContext(ctx, `SELECT revision FROM runs WHERE id = ?`, runID).Scan(&latest); err != nil {
		if errors.Is(err, sql.ErrNoRows) {
			return 0, record.ErrNotFound
		}
		return 0, err
	}
	if rev == 0 {
		return latest, nil
	}
	if rev < 1 || rev > latest {
		return 0, fmt.Errorf("revision %d (the run has %d): %w", rev, latest, record.ErrNotFound)
	}
	return rev, nil
}

// LoopsOf is Loops of revision rev (0: the latest).
func (s *Store) LoopsOf(ctx context.Context, runID string, rev int) ([]record.Loop, error) {
	tx, err := s.r.BeginTx(ctx, &sql.TxOptions{ReadOnly: true})
	if err != nil {
		return nil, fmt.Errorf("store: loops of run %s: %w", runID, err)
	}
	defer tx.Rollback()
	rev, err = revisionOf(ctx, tx, runID, rev)
	if err != nil {
		return nil, fmt.Errorf("store: loops of run %s: %w", runID, err)
	}
	rows, err := tx.QueryContext(ctx, `SELECT id, n, kind, amplitude, amp_unit, started_ns, ramped FROM loops WHERE run_id = ? AND revision = ? ORDER BY n`, runID, rev)
	if err != nil {
		return nil, fmt.Errorf("store: loops of run %s: %w", runID, err)
	}
	var out []record.Loop
	var ids []int64
	for rows.Next() {
		l := record.Loop{RunID: runID, Revision: rev}
		var amp sql.NullFloat64
		var st sql.NullInt64
		var id int64
		if err := rows.Scan(&id, &l.N, &l.Kind, &amp, &l.AmpUnit, &st, &l.Ramped); err != nil {
			rows.Close()
			return nil, fmt.Errorf("store: loops of run %s: %w", runID, err)
		}
		l.Amplitude, l.Started = floatOf(amp), timeOf(st)
		out = append(out, l)
		ids = append(ids, id)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store: loops of run %s: %w", runID, err)
	}
	for i := range out {
		if err := readDerived(ctx, tx, ids[i], &out[i]); err != nil {
			return nil, fmt.Errorf("store: loops of run %s: %w", runID, err)
		}
	}
	return out, nil
}

func readDerived(ctx context.Context, tx *sql.Tx, id int64, l *record.Loop) error {
	rows, err := tx.QueryContext(ctx, `SELECT name, value, u, unit, note FROM figures WHERE loop_id = ? ORDER BY seq`, id)
	if err != nil {
		return err
	}
	for rows.Next() {
		var f record.Figure
		var v, u sql.NullFloat64
		if err := rows.Scan(&f.Name, &v, &u, &f.Unit, &f.Note); err != nil {
			rows.Close()
			return err
		}
		f.Value, f.U = floatOf(v), floatOf(u)
		l.Figures = append(l.Figures, f)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return err
	}
	rows, err = tx.QueryContext(ctx, `SELECT grade, figure, value, u, lo, hi, unit, rule, outcome, note FROM verdicts WHERE loop_id = ? ORDER BY seq`, id)
	if err != nil {
		return err
	}
	for rows.Next() {
		var v record.Verdict
		var val, u, lo, hi sql.NullFloat64
		var o string
		if err := rows.Scan(&v.Grade, &v.Figure, &val, &u, &lo, &hi, &v.Unit, &v.Rule, &o, &v.Note); err != nil {
			rows.Close()
			return err
		}
		v.Value, v.U, v.Min, v.Max, v.Outcome = floatOf(val), floatOf(u), floatOf(lo), floatOf(hi), record.Outcome(o)
		l.Verdicts = append(l.Verdicts, v)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return err
	}
	rows, err = tx.QueryContext(ctx, `SELECT name, size, unit, note FROM corrections WHERE loop_id = ? ORDER BY seq`, id)
	if err != nil {
		return err
	}
	defer rows.Close()
	for rows.Next() {
		var c record.Correction
		var sz sql.NullFloat64
		if err := rows.Scan(&c.Name, &sz, &c.Unit, &c.Note); err != nil {
			return err
		}
		c.Size = floatOf(sz)
		l.Corrections = append(l.Corrections, c)
	}
	return rows.Err()
}

// Loop returns loop n of a run's latest revision with raw samples, points,
// figures and corrections; an error wrapping record.ErrNotFound if either
// is unknown.
func (s *Store) Loop(ctx context.Context, runID string, n int) (record.Loop, error) {
	return s.LoopOf(ctx, runID, n, 0)
}

// LoopOf is Loop of revision rev (0: the latest). The raw samples are those
// stored with revision 1.
func (s *Store) LoopOf(ctx context.Context, runID string, n, rev int) (record.Loop, error) {
	l, err := s.loop(ctx, runID, n, rev)
	if err != nil {
		return record.Loop{}, fmt.Errorf("store: loop %d of run %s: %w", n, runID, err)
	}
	return l, nil
}

func (s *Store) loop(ctx context.Context, runID string, n, rev int) (record.Loop, error) {
	tx, err := s.r.BeginTx(ctx, &sql.TxOptions{ReadOnly: true})
	if err != nil {
		return record.Loop{}, err
	}
	defer tx.Rollback()
	if rev, err = revisionOf(ctx, tx, runID, rev); err != nil {
		return record.Loop{}, err
	}
	l := record.Loop{RunID: runID, N: n, Revision: rev}
	var amp sql.NullFloat64
	var st sql.NullInt64
	var nRaw, nPts int
	var id, rawID int64
	err = tx.QueryRowContext(ctx, `SELECT id, kind, amplitude, amp_unit, started_ns, n_points, ramped FROM loops WHERE run_id = ? AND revision = ? AND n = ?`,
		runID, rev, n).Scan(&id, &l.Kind, &amp, &l.AmpUnit, &st, &nPts, &l.Ramped)
	if errors.Is(err, sql.ErrNoRows) {
		return record.Loop{}, record.ErrNotFound
	}
	if err != nil {
		return record.Loop{}, err
	}
	l.Amplitude, l.Started = floatOf(amp), timeOf(st)
	if err := tx.QueryRowContext(ctx, `SELECT id, n_raw FROM loops WHERE run_id = ? AND revision = 1 AND n = ?`, runID, n).Scan(&rawID, &nRaw); err != nil {
		return record.Loop{}, fmt.Errorf("raw samples: %w", err)
	}

	rows, err := tx.QueryContext(ctx, `SELECT t_ns, t_unc_ns, phase, setpoint, i_a, v_v, psi_wb, b_probe_t, temp_c, dt_i_ns, dt_b_ns
		FROM raw_samples WHERE loop_id = ? ORDER BY seq`, rawID)
	if err != nil {
		return record.Loop{}, err
	}
	l.Raw = make([]record.Sample, 0, nRaw)
	// Scanning into any skips database/sql's conversions (a large share of
	// the read time); anyFloat and anyInt do the few that are needed.
	var vals [11]any
	dest := make([]any, len(vals))
	for k := range vals {
		dest[k] = &vals[k]
	}
	phases := map[string]record.Phase{}
	for rows.Next() {
		if err := rows.Scan(dest...); err != nil {
			rows.Close()
			return record.Loop{}, err
		}
		var r record.Sample
		t, err1 := anyInt(vals[0])
		tu, err2 := anyInt(vals[1])
		di, err3 := anyInt(vals[9])
		db, err4 := anyInt(vals[10])
		if err := errors.Join(err1, err2, err3, err4); err != nil {
			rows.Close()
			return record.Loop{}, err
		}
		ph, ok := phases[anyString(vals[2])]
		if !ok {
			ph = record.Phase(anyString(vals[2]))
			phases[string(ph)] = ph
		}
		r.T, r.TUnc, r.Phase = time.Duration(t), time.Duration(tu), ph
		r.DtI, r.DtB = time.Duration(di), time.Duration(db)
		r.Setpoint, r.I, r.V = anyFloat(vals[3]), anyFloat(vals[4]), anyFloat(vals[5])
		r.Psi, r.BProbe, r.TempC = anyFloat(vals[6]), anyFloat(vals[7]), anyFloat(vals[8])
		l.Raw = append(l.Raw, r)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return record.Loop{}, err
	}

	rows, err = tx.QueryContext(ctx, `SELECT t_ns, h_a_m, b_t, j_t, branch FROM points WHERE loop_id = ? ORDER BY seq`, id)
	if err != nil {
		return record.Loop{}, err
	}
	l.Points = make([]record.Point, 0, nPts)
	var pv [5]any
	pdest := []any{&pv[0], &pv[1], &pv[2], &pv[3], &pv[4]}
	for rows.Next() {
		if err := rows.Scan(pdest...); err != nil {
			rows.Close()
			return record.Loop{}, err
		}
		t, err1 := anyInt(pv[0])
		br, err2 := anyInt(pv[4])
		if err := errors.Join(err1, err2); err != nil {
			rows.Close()
			return record.Loop{}, err
		}
		l.Points = append(l.Points, record.Point{T: time.Duration(t), H: anyFloat(pv[1]), B: anyFloat(pv[2]), J: anyFloat(pv[3]), Branch: int(br)})
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return record.Loop{}, err
	}
	if err := readDerived(ctx, tx, id, &l); err != nil {
		return record.Loop{}, err
	}
	return l, nil
}

// Events returns a run's events in the order they were added;
// record.ErrNotFound for an unknown run.
func (s *Store) Events(ctx context.Context, runID string) ([]record.Event, error) {
	if _, err := s.Run(ctx, runID); err != nil {
		return nil, err
	}
	rows, err := s.r.QueryContext(ctx, `SELECT at_ns, level, text FROM events WHERE run_id = ? ORDER BY id`, runID)
	if err != nil {
		return nil, fmt.Errorf("store: events of run %s: %w", runID, err)
	}
	defer rows.Close()
	var out []record.Event
	for rows.Next() {
		e := record.Event{RunID: runID}
		var at sql.NullInt64
		if err := rows.Scan(&at, &e.Level, &e.Text); err != nil {
			return nil, fmt.Errorf("store: events of run %s: %w", runID, err)
		}
		e.At = timeOf(at)
		out = append(out, e)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store: events of run %s: %w", runID, err)
	}
	return out, nil
}

// Revisions returns a run's revisions, oldest first (record.Reader).
func (s *Store) Revisions(ctx context.Context, runID string) ([]record.Revision, error) {
	r, err := s.Run(ctx, runID)
	if err != nil {
		return nil, err
	}
	if r.Revision <= 1 {
		return []record.Revision{record.FirstRevision(r)}, nil
	}
	rows, err := s.r.QueryContext(ctx, `SELECT n, at_ns, by_name, change, fixture, specimen, material, grade, config, config_hash
		FROM revisions WHERE run_id = ? AND n <= ? ORDER BY n`, runID, r.Revision)
	if err != nil {
		return nil, fmt.Errorf("store: revisions of run %s: %w", runID, err)
	}
	defer rows.Close()
	var out []record.Revision
	for rows.Next() {
		v := record.Revision{RunID: runID}
		var at sql.NullInt64
		if err := rows.Scan(&v.N, &at, &v.By, &v.Change, &v.Fixture, &v.Specimen, &v.Material, &v.Grade, &v.Config, &v.ConfigHash); err != nil {
			return nil, fmt.Errorf("store: revisions of run %s: %w", runID, err)
		}
		v.At = timeOf(at)
		out = append(out, v)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store: revisions of run %s: %w", runID, err)
	}
	return out, nil
}

// Trend returns figure values of one specimen across runs (each run's
// latest revision; the specimen as recorded), oldest first,
// for loops started at or after since (zero: all). The time of a point is
// the loop's start, or the run's start when the loop has none.
func (s *Store) Trend(ctx context.Context, specimen, figure string, since time.Time) ([]record.TrendPoint, error) {
	var sinceNs int64 = -1 << 62
	if !since.IsZero() {
		sinceNs = since.UnixNano()
	}
	rows, err := s.r.QueryContext(ctx, `
		SELECT l.run_id, l.n, COALESCE(l.started_ns, r.started_ns) AS at, f.value, f.u
		FROM figures f
		JOIN loops l ON l.id = f.loop_id
		JOIN runs r ON r.id = l.run_id AND l.revision = r.revision
		WHERE r.specimen = ? AND f.name = ? AND COALESCE(l.started_ns, r.started_ns, 0) >= ?
		ORDER BY at, l.run_id, l.n, f.seq`, specimen, figure, sinceNs)
	if err != nil {
		return nil, fmt.Errorf("store: trend of %s for %s: %w", figure, specimen, err)
	}
	defer rows.Close()
	var out []record.TrendPoint
	for rows.Next() {
		var p record.TrendPoint
		var at sql.NullInt64
		var v, u sql.NullFloat64
		if err := rows.Scan(&p.RunID, &p.Loop, &at, &v, &u); err != nil {
			return nil, fmt.Errorf("store: trend of %s for %s: %w", figure, specimen, err)
		}
		p.At, p.Value, p.U = timeOf(at), floatOf(v), floatOf(u)
		out = append(out, p)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("store: trend of %s for %s: %w", figure, specimen, err)
	}
	return out, nil
}

// anyFloat converts a scanned REAL (NULL is NaN).
func anyFloat(v any) float64 {
	switch x := v.(type) {
	case float64:
		return x
	case int64:
		return float64(x)
	}
	return math.NaN()
}

// anyInt converts a scanned INTEGER.
func anyInt(v any) (int64, error) {
	switch x := v.(type) {
	case int64:
		return x, nil
	case float64:
		return int64(x), nil
	}
	return 0, fmt.Errorf("integer column holds %T", v)
}

func anyString(v any) string {
	switch x := v.(type) {
	case string:
		return x
	case []byte:
		return string(x)
	}
	return ""
}
